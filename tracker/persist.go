package tracker

import "math"

// Defaults of the persistence weight (Config.Persist, Config.PersistLambda).
const (
	// DefaultPersist is the default constant k of Config.Persist, in
	// conditional standard deviations of one channel's relation to the
	// others. Negative: off. Chosen on the realism suite and the demo
	// together (README, Validation).
	DefaultPersist = 3.5
	// DefaultPersistLambda is the EWMA weight λ of the smoothed frame the
	// persistence weight looks at: a memory of about 1/λ = 20 frames.
	DefaultPersistLambda = 0.05
)

// persist is the persistence weight of learning (Config.Persist): a
// bounded-influence weight on how far, and for how long, the frames being
// learned have left a relation the model holds tightly.
//
// Why. The model learns every frame it does not mask. A relation the
// model holds tightly has a tiny conditional variance, so a slow drift of
// one of its channels that stays below the per-frame limits (a sensor
// drifting by a few tenths of a degree an hour) inflates that direction's
// variance severalfold within hours, even with a long half-life: the
// frames are each only a few conditional standard deviations off, but
// they are many, all off the same way, and the covariance learns their
// squared deviations in full. The per-frame Huber weight (Config.Robust)
// cannot see such frames: each is inside the limits.
//
// The weight. The frames as learned (masked channels reconstructed),
// standardized, are smoothed,
//
//	z̄ₜ = λzₜ + (1 − λ)z̄ₜ₋₁,  z̄₀ = 0,
//
// and each channel's deviation from the relation the model holds to the
// other channels is read off z̄ with Ω = (A + ε_R I)⁻¹ (the residual
// statistic's factor, see resStat):
//
//	sᵢ = (Ωz̄)ᵢ / √Ωᵢᵢ
//
// For one frame, (Ωz)ᵢ/√Ωᵢᵢ is channel i's deviation from its conditional
// expectation given every other channel in its own conditional standard
// deviations, about N(0, 1) in control (the variance statistic's rᵢ).
// sᵢ is compared with its own normal level, the mean ℓᵢ of sᵢ² over the
// normal frames (learned in fit, then from the frames with D ≤ k, see
// weight):
//
//	Dᵢ² = sᵢ² / ℓᵢ,   D = maxᵢ Dᵢ
//
// over the channels in the model, observed and not masked. The level
// makes D a channel's smoothed relation residual in its own normal
// spread: for a relation held only by measurement noise (frames
// independent) the smoothed residual's spread is √(λ/(2 − λ)), 0.16 at
// λ = 0.05, of the per-frame one, so a persistent departure of half a
// conditional standard deviation already gives D ≈ 3; for a channel that
// wanders slowly on its own the smoothed residual is as wide as the
// per-frame one, so its slow changes, as wide as in the normal data, keep
// D below k.
// The frame is learned with weight
//
//	w = min(1, (k/D)²)
//
// Huber's weight for scatter (Huber 1981, Robust Statistics, §8.4; the
// M-estimators of multivariate scatter of Maronna 1976, Ann. Statist.
// 4(1), 51–67, with u(d²) = min(1, k²/d²), stated from memory), taken on
// the smoothed deviation: the influence of a frame on the learned
// variance of the relation, w·D², is at most k², however long the
// departure persists, where with w = 1 it grows as D². A single spike
// moves z̄ by λ times its size and mostly leaves w at 1 (the per-frame
// weight bounds it). k is in the usual range of a robust rejection point,
// 2 to 4 standard deviations (Hampel, Ronchetti, Rousseeuw & Stahel
// 1986, Robust Statistics: The Approach Based on Influence Functions;
// from memory); the realism suite chose 3 among 2, 2.5, 3 and 4 (README).
//
// The weight multiplies the per-frame Huber weight. It needs the residual
// statistic's factor (Config.Residual, Variance or Mewma); without it the
// weight is 1. z̄, the levels and the last weight are state (checkpointed,
// version 6 on); a channel recentred to a new normal (Recentre) has its
// entry of z̄ set to 0, and a model entered from another operating state
// starts from z̄ = 0 (ResetMewma).
//
// Cost: z̄ every learned frame (O(p)); every e = persistInterval(p)
// learned frames (1 up to persistWidth channels) one forward and one back
// solve with the factor (p² multiply-adds), whose weight serves those e
// frames: at most persistWidth·p multiply-adds a frame, O(p) amortised;
// the diagonal of Ω once per factor the weight reads (p³/6, as much as
// the factor itself). Up to persistWidth channels that factor is the
// residual statistic's current one, so the weight is formed at every
// learned frame under the model that scores it. A wider unit reads a
// copy of the factor taken every e refreshes (the weight's own: p²/2
// copied, Ω's diagonal formed once for it), so the diagonal costs at
// most 1/e of the residual statistic's factorizations; its relation
// residuals are then read against a model at most e refreshes old, one
// model throughout (Ωz̄ and Ωᵢᵢ of the same factor). The copy is
// checkpointed with its age in refreshes (version 8), so a restored unit
// goes on as the one that ran on; from an older checkpoint a restored
// wide unit copies the restored model's factor. No allocation per frame.
type persist struct {
	p      int
	k, lam float64
	weigh  bool      // false: learn the levels, weigh nothing (Config.PersistLevelsOnly)
	zbar   []float64 // z̄, the state
	lvl    []float64 // ℓᵢ, the normal level of sᵢ² (state)
	lvlW   []float64 // evaluations behind ℓᵢ (state; 0: no level yet)
	b      []float64 // 2p: [L⁻¹z̄ | 0] (resStat.forwardIn)
	v      []float64 // Ωz̄
	w      float64   // the weight of the last evaluation (state)
	n      int       // learned frames since it, modulo every (state)
	last   float64   // D of the last evaluation (0 when not formed)
	every  int       // persistInterval(p)
	pin    *resGen   // the factor the weight reads when every > 1 (a copy; nil: the residual statistic's current one)
	pinRef int       // resStat.nref when pin was taken (−1: none yet)
	evals  int       // evaluations formed (for the cost rule's tests)
	pins   int       // factors copied into pin (idem)
}

// persistWidth is the widest unit whose persistence weight is formed at
// every learned frame under the current factor: the suite's units have
// 19–60 channels. A wider unit forms it every persistInterval(p) learned
// frames (persist, Cost).
const persistWidth = 64

// persistInterval is e = max(1, ⌈p/persistWidth⌉), the number of learned
// frames one evaluation of the persistence weight serves at p channels
// (z̄ is smoothed every frame; it moves by a share λ of a frame at a
// time), and the number of refreshes between the factor copies of a
// wide unit: the two solves (p² multiply-adds) every e frames cost at
// most persistWidth·p a frame.
func persistInterval(p int) int { return max(1, (p+persistWidth-1)/persistWidth) }

func newPersist(p int, cfg *Config) *persist {
	if !(cfg.Persist > 0) {
		return nil
	}
	ps := &persist{p: p, k: cfg.Persist, lam: cfg.PersistLambda, weigh: !cfg.PersistLevelsOnly, w: 1,
		zbar: make([]float64, p), lvl: make([]float64, p), lvlW: make([]float64, p),
		b: make([]float64, 2*p), v: make([]float64, p), every: persistInterval(p), pinRef: -1}
	if ps.every > 1 {
		ps.pin = &resGen{l: make([]float64, p*p), dd: make([]float64, p), inc: make([]bool, p),
			omd: make([]float64, p), mii: make([]float64, p)}
		if hasLaneKernel {
			ps.pin.pk = make([]float64, packedLen(p))
		}
	}
	for i := range ps.lvl {
		ps.lvl[i] = 1
	}
	return ps
}

// grown returns the weight's state for p2 ≥ p channels under cfg, z̄ and
// the levels carried on (the new channels at 0 and without a level).
func (ps *persist) grown(p2 int, cfg *Config) *persist {
	n := newPersist(p2, cfg)
	if n != nil && ps != nil {
		copy(n.zbar, ps.zbar)
		copy(n.lvl, ps.lvl)
		copy(n.lvlW, ps.lvlW)
		n.w, n.n = ps.w, ps.n%n.every
	}
	return n
}

// weight smooths z (the frame as learned, standardized; the channels not
// observed, stuck or out of the model keep their z̄) into z̄ and returns
// the persistence weight: every persistInterval(p) calls it is formed
// under the factor of rs that factor returns (the channels set in mask,
// nil: none, left out of D) and, if D ≤ k (or the levels are young), sᵢ²
// is folded into the normal levels; the calls between return the same
// weight.
func (ps *persist) weight(m *model, rs *resStat, z []float64, obs, stuck, mask []bool) float64 {
	p := ps.p
	zb := ps.zbar[:p]
	for i, v := range z[:p] {
		if m.include[i] && obs[i] && !stuck[i] {
			zb[i] += ps.lam * (v - zb[i])
		}
	}
	if rs == nil || !rs.ok {
		ps.last, ps.w, ps.n = 0, 1, 0
		return 1
	}
	if ps.n > 0 {
		ps.n = (ps.n + 1) % ps.every
		return ps.w
	}
	ps.n = 1 % ps.every
	ps.evals++
	g := ps.factor(rs)
	rs.forwardGen(g, ps.b, zb)
	rs.diagOf(g)
	upperSolveT(ps.v, ps.b, g.l, p)
	d := 0.0
	for i := 0; i < p; i++ {
		if !m.include[i] || !obs[i] || stuck[i] || (mask != nil && mask[i]) || !(g.omd[i] > 0) ||
			(g == ps.pin && !g.inc[i]) { // out of the model when the copy was taken: no relation there
			ps.v[i] = math.NaN()
			continue
		}
		ps.v[i] *= ps.v[i] / g.omd[i]
		if ps.lvlW[i] >= ps.start() {
			d = math.Max(d, ps.v[i]/ps.lvl[i])
		}
	}
	d = math.Sqrt(d)
	ps.last = d
	w := 1.0
	if ps.weigh {
		w = scatterWeight(d, ps.k)
	}
	ps.w = w
	// Only frames within k teach the levels once each has start()
	// evaluations behind it (before, every one: a level from a few frames
	// would refuse the next ones): a level learned from the frames the
	// weight bounds would grow with them (by up to k²·ℓ/n a frame,
	// compounding) and let the departure in.
	start := ps.start()
	for i, s2 := range ps.v[:p] {
		if !math.IsNaN(s2) && (!(d > ps.k) || ps.lvlW[i] < start) {
			ps.lvlW[i]++
			ps.lvl[i] += (s2 - ps.lvl[i]) / ps.lvlW[i]
		}
	}
	return w
}

// start is the number of evaluations (20/λ frames) a channel's level
// needs before it counts in D and before only frames within k teach it.
func (ps *persist) start() float64 { return 20 / ps.lam / float64(ps.every) }

// factor returns the factor the weight is formed under: the residual
// statistic's current one up to persistWidth channels; for a wider unit
// the copy in pin, taken again (lower triangle, packed rows, channels of
// the model; Ω's diagonal formed anew by diagOf) once every refreshes
// have passed since the last copy, or when there is none (a new or
// restored tracker).
func (ps *persist) factor(rs *resStat) *resGen {
	if ps.pin == nil {
		return &rs.gens[rs.cur]
	}
	if ps.pinRef >= 0 && rs.nref-ps.pinRef < ps.every {
		return ps.pin
	}
	src, g, p := &rs.gens[rs.cur], ps.pin, ps.p
	for i := 0; i < p; i++ {
		copy(g.l[i*p:i*p+i+1], src.l[i*p:i*p+i+1])
	}
	if g.pk != nil && src.pk != nil {
		copy(g.pk, src.pk)
	}
	copy(g.dd, src.dd)
	copy(g.inc, src.inc)
	g.diag = false
	ps.pinRef = rs.nref
	ps.pins++
	return g
}

// scatterWeight is Huber's weight for scatter, min(1, (k/d)²), at the
// distance d (see persist).
func scatterWeight(d, k float64) float64 {
	if !(d > k) {
		return 1
	}
	return (k / d) * (k / d)
}

// resetPersist sets z̄ᵢ = 0 for the channels set in which (nil: all).
func (t *Tracker) resetPersist(which []bool) {
	ps := t.ps
	if ps == nil {
		return
	}
	for i := range ps.zbar {
		if which == nil || (i < len(which) && which[i]) {
			ps.zbar[i] = 0
		}
	}
}

// PersistDistance returns D of the last frame learned (see persist): the
// largest smoothed deviation of a channel from its relation to the
// others, in conditional standard deviations, or a bound on it below
// Config.Persist when the weight was 1 without forming it; 0 when the
// weight is off or nothing was formed.
func (t *Tracker) PersistDistance() float64 {
	if t.ps == nil {
		return 0
	}
	return t.ps.last
}
