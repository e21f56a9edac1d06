package tracker

import "math"

// DefaultMewmaLambda is the EWMA weight λ of the MEWMA statistic
// (Config.MewmaLambda): a memory of about 1/λ = 20 frames.
const DefaultMewmaLambda = 0.05

// mewma is the multivariate EWMA statistic of the residual part of the
// frame (Config.Mewma), for shifts too small to see in one frame that
// persist over many.
//
// The standardized (and imputed) frames zₜ are smoothed,
//
//	z̄ₜ = λzₜ + (1 − λ)z̄ₜ₋₁,  z̄₀ = 0,
//
// and scored on the residual part of the model as the residual
// Mahalanobis statistic scores a frame (see resStat), with M = Ω − D:
//
//	E = (2 − λ)/λ · z̄ᵀMz̄ = (2 − λ)/λ · (‖L⁻¹z̄‖² − T²(z̄))
//
// For independent frames z ~ N(0, A) the asymptotic covariance of z̄ is
// λ/(2 − λ)·A (Lowry, Woodall, Champ & Rigdon 1992, Technometrics 34(1),
// 46–53), so E is the MEWMA statistic z̄ᵀΣ_z̄⁻z̄ of the residual vector
// Mz (covariance MAM = M), χ² on the residual dimensions p − r with mean
// p − r, and its limit is χ²_{1−α}(p − r). A shift δ (standardized) in a
// relation moves z̄ to δ and E by (2 − λ)/λ · δᵀMδ: a relation broken by
// 0.5 of its conditional standard deviation adds 0.25·(2 − λ)/λ, about
// 10 at λ = 0.05, which a single frame never shows. Its use on the
// residuals of a PCA model follows MacGregor & Kourti (1995, Control Eng.
// Practice 3(3), 403–414). Process data are serially correlated, which
// makes the χ² limit far too low; the alarm limit is then set by the
// budget calibration on held-out normal data, as for every statistic.
//
// The contribution of channel i is the reconstruction-based contribution
// of the index z̄ᵀMz̄ (Alcalá & Qin 2009), on the same scale as E:
//
//	RBCᵢ = (2 − λ)/λ · (Mz̄)ᵢ²/Mᵢᵢ,  in control ~ χ²(1).
//
// State and events. z̄ is state (checkpointed). A refresh keeps it: the
// channels are standardized by the running means and variances, which a
// refresh does not move, so z̄ stays in the coordinates of the frames it
// averages; resetting it at every refresh would blind the statistic for
// ~1/λ frames each time. An incident opening or closing keeps it: while a
// shift persists z̄ holds it (learning is frozen), and after the shift
// ends it decays within a few 1/λ frames on its own. A channel recentred
// to a new normal (Recentre) has its entry of z̄ set to 0: the deviation
// it held was from the level now given up. A model entered from another
// operating state starts from z̄ = 0 (ResetMewma), since its z̄ is from
// the last time that state ran.
//
// Cost per frame: one forward solve with the residual statistic's factor
// (p²/2 multiply-adds) and the mode scores of z̄ (O(nnz·r + r²)); the RBCs
// (one back solve, p²/2) only in frames it ranks the contributors. No
// allocation.
type mewma struct {
	p      int
	lam, k float64   // λ and (2 − λ)/λ
	zbar   []float64 // z̄, the state
	zc     []float64 // z̄ of the frame being scored (z̄ once Step keeps it)
	b      []float64 // 2p: [L⁻¹z̄ | 0] (resStat.forwardIn)
	v, dz  []float64 // Ωz̄ and Dz̄ (contributions)
	tq, y  []float64 // mode scores of z̄: 2·maxR, maxR
	rbc    []float64
	// rel is the factor by which the MEWMA statistic's alarm limit exceeds
	// the RBC index's, relative to their limits here (SetMewmaScale).
	rel float64
}

func newMewma(p, maxR int, cfg *Config) *mewma {
	if !cfg.Mewma {
		return nil
	}
	lam := cfg.MewmaLambda
	return &mewma{
		p: p, lam: lam, k: (2 - lam) / lam,
		zbar: make([]float64, p), zc: make([]float64, p), b: make([]float64, 2*p),
		v: make([]float64, p), dz: make([]float64, p),
		tq: make([]float64, 2*maxR), y: make([]float64, maxR), rbc: make([]float64, p),
		rel: 1,
	}
}

// grown returns the statistic for p2 ≥ p channels and maxR modes under
// cfg, z̄ carried on (the new channels at 0) and the scale kept.
func (mw *mewma) grown(p2, maxR int, cfg *Config) *mewma {
	n := newMewma(p2, maxR, cfg)
	if n != nil && mw != nil {
		copy(n.zbar, mw.zbar)
		n.rel = mw.rel
	}
	return n
}

// score smooths the standardized, imputed frame z into z̄ (kept when
// advance: Step, not Evaluate) and sets dst.Mewma and its limit under the
// model m and the residual statistic's factor rs.
func (mw *mewma) score(dst *Score, m *model, rs *resStat, z []float64, advance bool) {
	dst.Mewma, dst.MewmaLimit = 0, 0
	zb, zc := mw.zbar[:mw.p], mw.zc[:mw.p]
	for i, v := range z[:mw.p] {
		zc[i] = zb[i] + mw.lam*(v-zb[i])
	}
	if advance {
		copy(zb, zc)
	}
	if rs == nil || !rs.ok {
		return
	}
	q := rs.forwardIn(mw.b, zc)
	t2 := m.modeScoresOf(zc, mw.tq, mw.y, m.base)
	dst.Mewma = mw.k * max(q-t2, 0)
	dst.MewmaLimit = rs.lim
}

// contributions returns the RBC of the MEWMA statistic of the last frame
// scored (under the current model m and factor of rs): Ωz̄ = L⁻ᵀ(L⁻¹z̄)
// from the y left by score, Dz̄ = P·M'⁺Pᵀz̄ from its mode scores.
func (mw *mewma) contributions(m *model, rs *resStat) []float64 {
	p, r := mw.p, m.r
	g := &rs.gens[rs.cur]
	rs.diagOf(g)
	upperSolveT(mw.v, mw.b, g.l, p)
	dz := mw.dz[:p]
	for i := range dz {
		dz[i] = 0
	}
	nw := r + m.rq
	y := mw.y[:r]
	for a, i := range m.act {
		dz[i] = dot(m.pq[a*nw:a*nw+r], y)
	}
	for i := 0; i < p; i++ {
		mw.rbc[i] = 0
		if mi := g.mii[i]; mi > 0 && g.inc[i] {
			d := mw.v[i] - dz[i]
			mw.rbc[i] = mw.k * d * d / mi
		}
	}
	return mw.rbc
}

// rankMewma reports whether the contributors of the frame in dst are
// ranked by the RBC of the MEWMA statistic: when it is further over its
// limit, times the factor of SetMewmaScale, than the RBC index (value
// index against indexLim) and, when useRes, than the residual statistic
// too. A small persistent shift that only the MEWMA statistic sees is then
// named by the channels of the relation it breaks.
func (t *Tracker) rankMewma(dst *Score, index, indexLim float64, useRes bool) bool {
	if t.mw == nil || !(dst.MewmaLimit > 0) || !(indexLim > 0) {
		return false
	}
	r := dst.Mewma / (dst.MewmaLimit * t.mw.rel)
	if !(r > index/indexLim) {
		return false
	}
	return !useRes || r > dst.Residual/dst.ResidualLimit
}

// SetMewmaScale sets the factor c > 0 by which the alarm limit of the
// MEWMA statistic is raised relative to the RBC index's (and the residual
// statistic's) beyond the limits in Score, e.g. by a calibration that
// gave it its own scale: the contributors are ranked by the MEWMA
// statistic only when it is further over its raised limit than the index
// over its own, and its RBC limit is raised by c. 1 by default; a value
// that is not positive and finite is ignored. Without Config.Mewma it does
// nothing.
func (t *Tracker) SetMewmaScale(c float64) {
	if t.mw != nil && c > 0 && !math.IsInf(c, 0) {
		t.mw.rel = c
	}
}

// ResetMewma starts the MEWMA statistic again from z̄ = 0 (see mewma).
// Without Config.Mewma it does nothing.
func (t *Tracker) ResetMewma() {
	if t.mw != nil {
		clear(t.mw.zbar)
	}
}

// ResetSmoothing starts every smoothed frame of the tracker again from
// z̄ = 0: the MEWMA statistic's, the persistence weight's and the creep
// statistic's (which keeps its normal variances) and the level steps'
// window ring, as for a model entered
// from another operating state, whose smoothed frames are from the last
// time it ran. The one place a new smoothed state is reset with the others;
// what is off is left alone.
func (t *Tracker) ResetSmoothing() {
	t.ResetMewma()
	t.resetPersist(nil)
	t.ResetCreep()
	t.lst.reset()
}

// resetMewmaChannels sets z̄ᵢ = 0 for the channels set in which (a
// recentred channel's deviation was from the level it gave up).
func (t *Tracker) resetMewmaChannels(which []bool) {
	if t.mw == nil {
		return
	}
	for i, w := range which {
		if w && i < t.mw.p {
			t.mw.zbar[i] = 0
		}
	}
}
