package tracker

import "math"

// MaxLevelStepFrames bounds Config.LevelStep: the window ring holds
// 2·LevelStep frames of p values.
const MaxLevelStepFrames = 360

// levelStep is each channel's level step against its relation to the
// others (Config.LevelStep): the change of the channel's standardized
// conditional residual between two adjacent windows of k frames,
//
//	z̄ᴬ = mean of z over the last k frames, z̄ᴮ over the k frames before,
//	sᵢ = (Ω(z̄ᴬ − z̄ᴮ))ᵢ / √Ωᵢᵢ,
//
// with z the standardized, imputed frame and Ω = (A + ε_R I)⁻¹ the
// precision of the model's correlation (the factor of the residual
// statistic). (Ωz)ᵢ/Ωᵢᵢ is the residual of channel i given all the others
// (the regression of zᵢ on z₋ᵢ), of variance 1/Ωᵢᵢ, so sᵢ is the step of
// that residual in its own standard deviations. The mean of k frames and
// the conditional residual are both linear in z, so only the window means
// are kept per frame and Ω is applied to their difference when sᵢ is due.
//
// It is the two-window test for an abrupt change in the mean (the
// difference of the means after and before a candidate change point;
// Basseville & Nikiforov 1993, Detection of Abrupt Changes, ch. 2),
// applied to the model's conditional residuals as the reconstruction
// residuals of Dunia & Qin (1998) are used for one sensor's fault: a
// channel whose reading moves with its relation to the others (a setpoint
// change, the load) keeps its residual, a transmitter that shifts against
// them steps it. For independent frames sᵢ has variance 2/k; process
// residuals wander, so the alarm level of each channel is learned from
// the normal log (alerts.ChannelProfile.LevelStepMax).
//
// State and events. The ring of the last 2k frames, the two sums and the
// read runs are checkpointed (version 9); a fitted model file is written
// with the ring empty (a replay starts later than the normal log ends),
// so its first steps come 2k frames in. Entering a model from another operating state
// (ResetSmoothing) and moving the means (Recentre) empty the ring, since
// the frames before are standardized by other means. A refresh keeps it
// (the frames' standardization does not move; Ω is applied when sᵢ is due).
//
// Cost per frame: 2p additions, and per evaluation (every frame up to 128
// channels, then every ⌈p/128⌉² frames as creep) two triangular solves,
// p² multiply-adds; the diagonal of Ω (p³/6) at every evaluation up to 128
// channels, above every creepNormEvery evaluations (nrm). No allocation.
type levelStep struct {
	p, k, every int
	ring        []float64 // 2k rows of p: z of the last 2k frames, row head next
	head, n     int       // next row, rows filled (≤ 2k)
	sumA, sumB  []float64 // Σz over the last k frames, over the k before
	since       int       // frames since the sums were formed again
	d, b, om    []float64 // z̄ᴬ − z̄ᴮ, [L⁻¹d | 0], Ωd
	s           []float64 // sᵢ of the last evaluation
	ok          bool      // s is valid
	seen        []int     // frames channel i has been read in a row (observed, not stuck)
	// nrm holds 1/√Ωᵢᵢ of the channels in the model (0 for the others),
	// formed at every evaluation up to creepFullP channels and above
	// every creepNormEvery evaluations (nrmAge counts them; the diagonal
	// of Ω costs p³/6 and moves slowly with the exponentially weighted
	// correlation); nrmOK once formed.
	nrm    []float64
	nrmAge int
	nrmOK  bool
}

// newLevelStep returns the level steps for p channels under cfg (nil
// without Config.LevelStep).
func newLevelStep(p int, cfg *Config) *levelStep {
	k := cfg.LevelStep
	if k <= 0 {
		return nil
	}
	return &levelStep{
		p: p, k: k, every: creepEvery(p),
		ring: make([]float64, 2*k*p), sumA: make([]float64, p), sumB: make([]float64, p),
		d: make([]float64, p), b: make([]float64, 2*p), om: make([]float64, p), s: make([]float64, p),
		seen: make([]int, p), nrm: make([]float64, p),
	}
}

// grown returns the level steps for p2 ≥ p channels, empty (the ring's
// rows change width).
func (ls *levelStep) grown(p2 int, cfg *Config) *levelStep { return newLevelStep(p2, cfg) }

// reset empties the ring.
func (ls *levelStep) reset() {
	if ls == nil {
		return
	}
	ls.head, ls.n, ls.since, ls.ok = 0, 0, 0, false
	clear(ls.sumA)
	clear(ls.sumB)
	clear(ls.seen)
}

// push adds the frame z (standardized, imputed; len ≥ p) to the ring and
// the sums: the frame leaving window A enters B, the one leaving B drops.
func (ls *levelStep) push(z []float64) {
	p, k := ls.p, ls.k
	row := func(j int) []float64 { j %= 2 * k; return ls.ring[j*p : j*p+p] }
	if ls.n >= k {
		mid := row(ls.head + k) // k frames back: leaves A, enters B
		for i, v := range mid {
			ls.sumA[i] -= v
			ls.sumB[i] += v
		}
	}
	if ls.n == 2*k {
		old := row(ls.head) // 2k frames back: leaves B
		for i, v := range old {
			ls.sumB[i] -= v
		}
	}
	cur := row(ls.head)
	copy(cur, z[:p])
	for i, v := range cur {
		ls.sumA[i] += v
	}
	ls.head = (ls.head + 1) % (2 * k)
	ls.n = min(ls.n+1, 2*k)
	// Form the sums again from the ring every 2k frames, so that rounding
	// does not accumulate over days (O(p) per frame on average).
	if ls.since++; ls.since >= 2*k && ls.n == 2*k {
		ls.since = 0
		clear(ls.sumA)
		clear(ls.sumB)
		for j := 0; j < 2*k; j++ {
			r := row(ls.head + j) // oldest first: B, then A
			sum := ls.sumB
			if j >= k {
				sum = ls.sumA
			}
			for i, v := range r {
				sum[i] += v
			}
		}
	}
}

// score takes the frame z into the ring (when advance) and, once the ring
// is full and an evaluation is due (frame number frame), sets s under the
// factor of rs. A channel out of the model, or not read (observed, not
// stuck and in the model: obs, stuck, include) in every frame of the two
// windows, gets 0, and its own window difference is taken as 0: its
// imputed values are the model's expectation (out of the model, 0), and
// its return to a reading would step its residual by the residual itself,
// and the others' through Ω.
func (ls *levelStep) score(rs *resStat, z []float64, obs, stuck, include []bool, frame uint64, advance bool) {
	if advance {
		ls.push(z)
		for i := range ls.seen {
			if obs[i] && !stuck[i] && include[i] {
				ls.seen[i] = min(ls.seen[i]+1, 2*ls.k)
			} else {
				ls.seen[i] = 0
			}
		}
	}
	if ls.n < 2*ls.k || rs == nil || !rs.ok {
		ls.ok = false
		return
	}
	if ls.ok && frame%uint64(ls.every) != 0 {
		return
	}
	g := &rs.gens[rs.cur]
	if ls.every == 1 || !ls.nrmOK || ls.nrmAge >= creepNormEvery {
		rs.diagOf(g)
		for i := range ls.nrm {
			ls.nrm[i] = 0
			if g.inc[i] && g.omd[i] > 0 {
				ls.nrm[i] = 1 / math.Sqrt(g.omd[i])
			}
		}
		ls.nrmAge, ls.nrmOK = 0, true
	}
	ls.nrmAge++
	p := ls.p
	inv := 1 / float64(ls.k)
	for i := 0; i < p; i++ {
		ls.d[i] = 0
		if ls.seen[i] >= 2*ls.k {
			ls.d[i] = (ls.sumA[i] - ls.sumB[i]) * inv
		}
	}
	rs.forwardIn(ls.b, ls.d)
	upperSolveT(ls.om, ls.b, g.l, p)
	for i := 0; i < p; i++ {
		ls.s[i] = 0
		if g.inc[i] && ls.seen[i] >= 2*ls.k {
			ls.s[i] = ls.om[i] * ls.nrm[i]
		}
	}
	ls.ok = true
}

// LevelStepsTo copies each channel's level step sᵢ of the last scored
// frame (see levelStep; in standard deviations of the channel's
// conditional residual) into dst (len ≥ p) and reports whether they are
// valid: false without Config.LevelStep, before the ring holds 2k frames
// (after a start, a restore, an operating-state switch or a recentring)
// and before the model's first refresh.
func (t *Tracker) LevelStepsTo(dst []float64) bool {
	if t.lst == nil || !t.lst.ok {
		return false
	}
	copy(dst[:t.p], t.lst.s)
	return true
}

// ResetLevelSteps empties the level steps' window ring (a status reading
// changed: the relations before and after differ); the steps are valid
// again 2·LevelStep frames later. Without Config.LevelStep it does nothing.
func (t *Tracker) ResetLevelSteps() { t.lst.reset() }

// LevelStepOf returns, for channel i of the last scored frame, its mean
// over the window before the level step and over the window after (the k
// frames before the last k, and the last k) and the unexplained step, the
// step of its conditional residual sᵢ/√Ωᵢᵢ, all in the channel's unit:
// each window's mean of the standardized frames z̄ is carried back as
// μᵢ + σᵢz̄ and the step as σᵢsᵢ/√Ωᵢᵢ, with the mean μᵢ and standard
// deviation σᵢ the frames are standardized with now (the ring empties
// when they move, see levelStep); the means are the last frame's, the
// step the last evaluation's (every frame up to 128 channels, see
// levelStep). ok is false when LevelStepsTo's steps
// are not valid, i is not a channel, or channel i has no step (out of
// the model, or not read throughout both windows).
func (t *Tracker) LevelStepOf(i int) (before, after, step float64, ok bool) {
	ls := t.lst
	if ls == nil || !ls.ok || i < 0 || i >= ls.p || ls.nrm[i] == 0 || ls.seen[i] < 2*ls.k {
		return 0, 0, 0, false
	}
	mu, sd := t.ew.Mean(i), math.Sqrt(t.scaleVar(i))
	inv := 1 / float64(ls.k)
	return mu + sd*ls.sumB[i]*inv, mu + sd*ls.sumA[i]*inv, sd * ls.s[i] * ls.nrm[i], true
}
