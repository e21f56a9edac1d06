package tracker

import (
	"math"

	"modewatch/tracker/limits"
)

// DefaultCreepLambda is the EWMA weight λ of the creep statistic
// (Config.CreepLambda): a memory of about 1/λ = 20 frames.
const DefaultCreepLambda = 0.05

// creepFullP is the channel count up to which the creep statistic forms
// Mz̄ at every frame; a unit of p > creepFullP channels forms it every
// ⌈p/creepFullP⌉² frames (creepEvery) and holds it in between.
const creepFullP = 128

// creepEvery returns the number of frames between two evaluations of the
// creep statistic for p channels: 1 up to creepFullP, then ⌈p/creepFullP⌉²,
// so that the per-frame share of its two triangular solves (p² multiply-
// adds) stays about creepFullP².
func creepEvery(p int) int {
	if p <= creepFullP {
		return 1
	}
	k := (p + creepFullP - 1) / creepFullP
	return k * k
}

// creep is the per-channel smoothed residual statistic (Config.Creep): a
// chart of each channel's standardized reconstruction residual, smoothed
// and normalised by its own observed normal variance, for small shifts of
// one relation that persist over many frames.
//
// With M = Ω − D the matrix of the residual statistic (see resStat), the
// standardized reconstruction residual of channel i is
//
//	sᵢ = (Mz)ᵢ/√Mᵢᵢ,  in control ~ N(0, 1) for independent frames
//
// ((MAM)ᵢᵢ = Mᵢᵢ; Alcalá & Qin 2009: sᵢ² is the reconstruction-based
// contribution of channel i). It is smoothed, s̄ₜ = λsₜ + (1 − λ)s̄ₜ₋₁,
// which for a model M held fixed is s̄ = diag(M)^(−1/2)·Mz̄ with z̄ the EWMA
// of the standardized frames: s̄ is formed from z̄, which is the state.
// For independent frames Var(s̄ᵢ) = λ/(2 − λ) (Lucas & Saccucci 1990,
// Technometrics 32(1), 1–12). Process residuals are not independent: a
// channel whose residual wanders (a sensor-specific AR(1) of time constant
// τ) has Var(s̄ᵢ) many times larger — for an AR(1) of coefficient φ and
// variance σ²,
//
//	Var(s̄) = σ²·λ(1 + (1 − λ)φ) / ((2 − λ)(1 − (1 − λ)φ))
//
// (derived by summing the EWMA weights against the autocovariance σ²φ^|h|;
// the use of the actual variance of the EWMA on autocorrelated data is
// Lu & Reynolds 1999, J. Quality Technology 31(2), 166–188, and charting
// the residuals of a model of the process is Montgomery & Mastrangelo
// 1991, J. Quality Technology 23(3), 179–193). So each channel's chart is
// normalised by vᵢ, the observed second moment of s̄ᵢ on the frames the
// tracker learns, exponentially weighted with the model's forgetting
// (cumulative start, from the independent-frame value λ/(2 − λ) counted as
// (2 − λ)/λ frames):
//
//	Cᵢ = s̄ᵢ² / max(vᵢ, λ/(2 − λ)),  in control mean about 1;  C = maxᵢ Cᵢ
//
// A wandering channel's chart thus becomes less sensitive instead of
// raising false alerts, and a tight relation keeps the full sensitivity
// of the EWMA. vᵢ is not taken below the independent-frame value: a lower
// estimate is chance (or negative autocorrelation, rare in process data),
// and would make the chart more sensitive than the plain EWMA chart. The
// limit is χ²_{1−α/p_in}(1) (each term about χ²₁; a Bonferroni share per
// channel); the residuals are serially correlated and the normal data
// finite, so the alarm threshold comes from the budget calibration, as for
// every statistic. The terms Cᵢ are the contributions; the channel of the
// largest names the statistic (Score.CreepChannel). A channel the modes
// hold almost entirely has no chart (creepMinResidual).
//
// State and events. z̄ and v are state (checkpointed). A refresh keeps
// both: z̄ is in the coordinates of the running standardization, which a
// refresh does not move, and vᵢ is the variance of a residual already
// standardized by √Mᵢᵢ (1 for independent frames whatever M), so it
// measures the channel's own serial correlation, a property of the
// process that a new model keeps; it follows a changed model at the
// model's forgetting rate. vᵢ learns only on frames the tracker learns
// (not frozen, not a fitted baseline) and where the channel is observed
// and not stuck, so a fault that freezes learning does not teach it.
// Incidents opening or closing keep z̄ (as for the MEWMA statistic). A
// channel recentred to a new normal (Recentre) has z̄ᵢ set to 0; a model
// entered from another operating state starts from z̄ = 0 (ResetCreep).
//
// Cost per evaluation: a forward and a back solve with the residual
// statistic's factor (p² multiply-adds) and the mode scores of z̄; the
// diagonal of Ω (O(p³/6)) once per factor for the normalisers. Above
// creepFullP channels one evaluation every creepEvery(p) frames, the
// statistic held in between (z̄ moves by λ per frame: over k ≪ 1/λ frames
// it barely changes), and the normalisers every creepNormEvery
// evaluations. No allocation.
type creep struct {
	p          int
	lam, g, n0 float64 // λ, λ/(2 − λ) and the prior's frames (2 − λ)/λ
	every      int
	zbar, zc   []float64 // z̄ (state) and z̄ of the frame being scored
	sbar       []float64 // s̄ of the last evaluation (state: held between evaluations)
	v, n       []float64 // normal second moment of s̄ᵢ and evaluations behind it (state)
	nrm        []float64 // 1/√Mᵢᵢ of the charted channels, 0 for the others (state above creepFullP; normalisers)
	nrmOK      bool      // nrm formed (or restored)
	sc         []float64 // s̄ of an evaluation that does not advance (Evaluate)
	b          []float64 // 2p: [L⁻¹z̄ | 0]
	om, dz     []float64 // Ωz̄ and Dz̄
	tq, y      []float64 // mode scores of z̄
	term       []float64 // Cᵢ of the last frame scored
	alpha      float64
	af         float64 // step of v once its start is past: 1 − μ^every (μ the model's forgetting per frame)
	lim        float64 // the limit, for p_in channels
	limPin     int
	// rel is the factor by which the statistic's alarm limit exceeds the
	// RBC index's, relative to their limits here (SetCreepScale).
	rel float64
}

// newCreep returns the statistic for p channels and maxR modes under cfg
// (nil without Config.Creep), mu the model's forgetting factor per frame.
func newCreep(p, maxR int, mu float64, cfg *Config) *creep {
	if !cfg.Creep {
		return nil
	}
	lam := cfg.CreepLambda
	c := &creep{
		p: p, lam: lam, g: lam / (2 - lam), n0: (2 - lam) / lam, every: creepEvery(p),
		zbar: make([]float64, p), zc: make([]float64, p), sbar: make([]float64, p),
		v: make([]float64, p), n: make([]float64, p), sc: make([]float64, p),
		nrm: make([]float64, p),
		b:   make([]float64, 2*p), om: make([]float64, p), dz: make([]float64, p),
		tq: make([]float64, 2*maxR), y: make([]float64, maxR), term: make([]float64, p),
		alpha: cfg.Alpha, limPin: -1, rel: 1,
	}
	c.af = 1 - math.Pow(mu, float64(c.every))
	c.prior()
	return c
}

// prior sets the normal variance of every channel to that of independent
// frames, Var(s̄) = λ/(2 − λ) (Lucas & Saccucci 1990), counted as n0
// evaluations (the limit and the normalisers are set at the next frame).
func (c *creep) prior() {
	for i := range c.v {
		c.v[i], c.n[i] = c.g, c.n0
	}
	c.limPin, c.nrmOK = -1, false
}

// creepNormEvery is the number of evaluations between two updates of the
// normalisers above creepFullP channels (normalisers).
const creepNormEvery = 64

// limit returns the statistic's limit for pin channels in the model,
// χ²_{1−α/p_in}(1).
func (c *creep) limit(pin int) float64 {
	return limits.ChiSquare(1-c.alpha/float64(max(pin, 1)), 1)
}

// grown returns the statistic for p2 ≥ p channels and maxR modes under
// cfg, its state carried on (the new channels at their prior) and the
// scale kept.
func (c *creep) grown(p2, maxR int, mu float64, cfg *Config) *creep {
	n := newCreep(p2, maxR, mu, cfg)
	if n != nil && c != nil {
		copy(n.zbar, c.zbar)
		copy(n.sbar, c.sbar)
		copy(n.v, c.v)
		copy(n.n, c.n)
		n.rel = c.rel
	}
	return n
}

// score smooths the standardized, imputed frame z into z̄ (kept when
// advance: Step, not Evaluate), forms s̄ = diag(M)^(−1/2)·Mz̄ on the frames
// due (frame number frame; see creepEvery), learns v when learn, and sets
// dst.Creep, its limit and channel under the model m and the residual
// statistic's factor rs. obs and stuck mark the channels seen in the
// frame.
func (c *creep) score(dst *Score, m *model, rs *resStat, z []float64, obs, stuck []bool, frame uint64, advance, learn bool) {
	dst.Creep, dst.CreepLimit, dst.CreepChannel = 0, 0, -1
	p := c.p
	zb, zc := c.zbar[:p], c.zc[:p]
	for i, v := range z[:p] {
		zc[i] = zb[i] + c.lam*(v-zb[i])
	}
	if advance {
		copy(zb, zc)
	}
	if rs == nil || !rs.ok {
		return
	}
	g := &rs.gens[rs.cur]
	if c.every == 1 || (advance && (!c.nrmOK || frame%uint64(creepNormEvery*c.every) == 0)) {
		c.normalisers(rs, g)
	}
	if !c.nrmOK {
		return // Evaluate before the first Step of a model
	}
	s := c.sbar[:p]
	if frame%uint64(c.every) == 0 {
		s = c.sc[:p]
		c.residuals(s, m, rs, g, zc)
		if advance && learn {
			for i := 0; i < p; i++ {
				if !obs[i] || stuck[i] || !(c.nrm[i] > 0) || !g.inc[i] {
					continue
				}
				c.n[i]++
				a := math.Max(1/c.n[i], c.af)
				c.v[i] += a * (s[i]*s[i] - c.v[i])
			}
		}
		if advance {
			copy(c.sbar[:p], s)
		}
	}
	pin := 0
	best, bi := 0.0, -1
	for i := 0; i < p; i++ {
		c.term[i] = 0
		if !g.inc[i] {
			continue
		}
		pin++
		if !(c.nrm[i] > 0) {
			continue
		}
		x := s[i] * s[i] / math.Max(c.v[i], c.g)
		c.term[i] = x
		if x > best {
			best, bi = x, i
		}
	}
	if pin != c.limPin {
		c.limPin = pin
		c.lim = c.limit(pin)
	}
	dst.Creep, dst.CreepLimit, dst.CreepChannel = best, c.lim, bi
}

// normalisers sets nrmᵢ = 1/√Mᵢᵢ for the channels charted under the
// factor g (0 for the others), forming the factor's diagonal first
// (O(p³/6) once per factor): at every frame up to creepFullP channels,
// above every creepNormEvery evaluations (the diagonal of one refresh
// in that many; Mᵢᵢ moves slowly with the exponentially weighted
// covariance, and vᵢ is learned on the same normalisers).
func (c *creep) normalisers(rs *resStat, g *resGen) {
	rs.diagOf(g)
	for i := range c.nrm {
		c.nrm[i] = 0
		if c.charted(g, i) {
			c.nrm[i] = 1 / math.Sqrt(g.mii[i])
		}
	}
	c.nrmOK = true
}

// residuals sets s = diag(M)^(−1/2)·Mz̄ (0 for channels not charted) under
// the factor g of rs and the model m: Ωz̄ = L⁻ᵀ(L⁻¹z̄), Dz̄ = P·M'⁺Pᵀz̄ from
// the mode scores of z̄, diag(M)^(−1/2) from normalisers.
func (c *creep) residuals(s []float64, m *model, rs *resStat, g *resGen, zc []float64) {
	p, r := c.p, m.r
	rs.forwardIn(c.b, zc)
	upperSolveT(c.om, c.b, g.l, p)
	m.modeScoresOf(zc, c.tq, c.y, m.base)
	dz := c.dz[:p]
	clear(dz)
	nw := r + m.rq
	y := c.y[:r]
	for a, i := range m.act {
		dz[i] = dot(m.pq[a*nw:a*nw+r], y)
	}
	for i := 0; i < p; i++ {
		s[i] = 0
		if g.inc[i] {
			s[i] = (c.om[i] - dz[i]) * c.nrm[i]
		}
	}
}

// creepMinResidual is the least share Mᵢᵢ/Ωᵢᵢ of a channel's conditional
// precision left outside the modes for the channel to be charted: a
// channel the modes hold almost entirely (a mode of its own) has almost
// no residual, and dividing by √Mᵢᵢ would blow the model's small
// mismatches in it up by up to 1/√Mᵢᵢ (T² watches such a channel).
const creepMinResidual = 0.01

// charted reports whether channel i has a chart under the factor g: in
// the model, with Mᵢᵢ ≥ creepMinResidual·Ωᵢᵢ.
func (c *creep) charted(g *resGen, i int) bool {
	return g.inc[i] && g.mii[i] > 0 && g.mii[i] >= creepMinResidual*g.omd[i]
}

// rankCreep reports whether the contributors of the frame in dst are
// ranked by the creep statistic's terms: when it is further over its
// limit, times the factor of SetCreepScale, than the statistic the
// contributors would otherwise come from (best, its value over its limit).
func (t *Tracker) rankCreep(dst *Score, best float64) bool {
	if t.cr == nil || !(dst.CreepLimit > 0) {
		return false
	}
	return dst.Creep/(dst.CreepLimit*t.cr.rel) > best
}

// SetCreepScale sets the factor c > 0 by which the alarm limit of the
// creep statistic is raised relative to the RBC index's beyond the limit
// in Score (see SetMewmaScale). 1 by default; a value that is not positive
// and finite is ignored. Without Config.Creep it does nothing.
func (t *Tracker) SetCreepScale(c float64) {
	if t.cr != nil && c > 0 && !math.IsInf(c, 0) {
		t.cr.rel = c
	}
}

// ResetCreep starts the creep statistic's smoothing again from z̄ = 0 (a
// model entered from another operating state), keeping its normal
// variances. Without Config.Creep it does nothing.
func (t *Tracker) ResetCreep() {
	if t.cr != nil {
		clear(t.cr.zbar)
		clear(t.cr.sbar)
	}
}

// CreepTermsTo copies the creep statistic's per-channel terms s̄ᵢ²/vᵢ of
// the last scored frame into dst (len p); zeros without Config.Creep.
func (t *Tracker) CreepTermsTo(dst []float64) {
	if t.cr == nil {
		clear(dst)
		return
	}
	copy(dst, t.cr.term)
}

// resetCreepChannels sets z̄ᵢ = s̄ᵢ = 0 for the channels set in which.
func (t *Tracker) resetCreepChannels(which []bool) {
	if t.cr == nil {
		return
	}
	for i, w := range which {
		if w && i < t.cr.p {
			t.cr.zbar[i], t.cr.sbar[i] = 0, 0
		}
	}
}
