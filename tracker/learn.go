package tracker

import "math"

// DefaultRobust is the default Huber constant of Config.Robust: frames
// within 3 times the φ limit's distance are learned with full weight.
// Chosen on the realism suite and the demo together (README, Validation).
const DefaultRobust = 3

// learnWork is the scratch of the learning pass, sized in New.
type learnWork struct {
	w   *work
	xl  []float64 // the frame as learned: masked channels reconstructed
	dec []float64 // addConditional: the pending decay of each channel of the pattern
	sd  []float64 // addConditional: the EW standard deviation of each channel of the pattern
}

func newLearnWork(p, maxR int) *learnWork {
	return &learnWork{w: newWork(p, maxR), xl: make([]float64, p), dec: make([]float64, p), sd: make([]float64, p)}
}

// StepMasked is Step with learning around faults. It scores x like Step;
// then, unless learning is frozen, it learns the frame with
//
//   - the channels set in mask (nil: none; else len p) replaced by their
//     reconstruction from the other channels: the conditional expectation
//     under the model, ẑ_m = A_mo A_oo⁻¹ z_o, as for missing channels
//     (Dunia & Qin 1998; Alcalá & Qin 2009), so that the rest of the unit
//     keeps learning while a fault in the masked channels is not learned
//     (under the ridge of Config.LearnRidge: by default that of the
//     residual statistic when the tracker has it, see learnPattern);
//   - a bounded-influence weight (Huber 1964): with d = √(φ/φ_lim) the
//     distance of the frame on its unmasked channels (φ and its limit
//     under the reduced model of the masked pattern), the frame is learned
//     with weight w = min(1, k/d), k = Config.Robust — Huber's ψ(d)/d — so
//     a frame far outside the limits moves the model as much as one at k
//     and no more (Huber, "Robust estimation of a location parameter",
//     Ann. Math. Statist. 35(1), 1964: the weight of his M-estimator).
//
// Score.LearnWeight reports w (0 when nothing was learned). Channels that
// are missing are not learned, as with Step. The reconstruction is less
// variable than the channel; the conditional covariance is added to the
// masked channels' variances and covariances (addConditional) so that a
// long mask does not shrink them. Allocation-free like Step once the
// masked pattern is cached.
func (t *Tracker) StepMasked(dst *Score, x []float64, missing, mask []bool) error {
	if err := t.prepare(x, missing, true); err != nil {
		return err
	}
	if mask != nil && len(mask) != t.p {
		return ErrWidth
	}
	t.frames++
	t.stepping = true
	err := t.score(dst, x)
	t.stepping = false
	if err != nil {
		return err
	}
	dst.LearnWeight = 0
	if t.frozen || t.baseline {
		return nil
	}
	r := ratio(dst.Phi, dst.PhiLimit)
	scored := t.lag == nil // t.w holds this frame standardized (score)
	if t.lag != nil {
		var ok bool
		if x, mask, r, ok = t.lag.swap(t, x, mask, r); !ok {
			return nil // the ring is filling: nothing to learn yet
		}
	}
	xl, wt, err := t.learnFrame(r, x, mask, scored)
	if err != nil {
		return err
	}
	dst.LearnWeight = wt
	return t.learnStep(xl, wt)
}

// learnFrame returns the frame to learn (x itself, or a copy with the
// masked channels reconstructed) and its weight; r is the frame's φ over
// its limit (the distance when no channel is masked). t.obs and t.stuck
// hold the frame's flags; scored reports that t.w holds x standardized by
// score, whose values are then reused (maskScored).
//
// Per frame with k channels masked this costs, beyond Step, the product
// ẑ_m = H z (k·p multiply-adds), a second scoring under the masked
// pattern (its φ and limit, O(p + nnz·r)) and the conditional-covariance
// term; the pattern's H and K come from a cache (learnPattern), built
// once per refresh and masked set.
func (t *Tracker) learnFrame(r float64, x []float64, mask []bool, scored bool) ([]float64, float64, error) {
	if !t.ready {
		return x, 1, nil
	}
	any := false
	for i, m := range mask {
		if m && t.obs[i] && t.mdl.include[i] {
			any = true
			break
		}
	}
	xl := x
	if any {
		lw := t.lw
		w := lw.w
		if scored {
			t.maskScored(w, t.w, mask)
		} else {
			t.standardize(w, x, mask)
		}
		pt, err := t.learnPattern(w.miss)
		if err != nil {
			return nil, 0, ErrModel
		}
		t.mdl.impute(w.z, pt, w.imp)
		copy(lw.xl, x)
		for i, m := range mask {
			if m && t.obs[i] && t.mdl.include[i] {
				lw.xl[i] = t.ew.Mean(i) + math.Sqrt(t.scaleVar(i))*w.z[i]
			}
		}
		xl = lw.xl
		_, _, phi := t.mdl.phiZ(w, pt)
		lim := pt.phiLim
		if t.cal {
			lim *= t.calScale[2]
		}
		r = ratio(phi, lim)
		wt := huberWeight(r, t.cfg.Robust) * t.persistWeight(w.z, mask)
		t.addConditional(pt, mask, wt)
		return xl, wt, nil
	}
	wt := huberWeight(r, t.cfg.Robust)
	if t.ps != nil {
		z := t.w.z
		if !scored {
			t.standardize(t.lw.w, x, nil)
			z = t.lw.w.z
		}
		wt *= t.persistWeight(z, nil)
	}
	return xl, wt, nil
}

// persistWeight is the persistence weight (persist) of the frame being
// learned, z standardized (masked channels reconstructed), 1 without it.
func (t *Tracker) persistWeight(z []float64, mask []bool) float64 {
	if t.ps == nil {
		return 1
	}
	return t.ps.weight(t.mdl, t.rs, z, t.obs, t.stuck, mask)
}

// maskScored fills w as standardize(w, x, mask) would, from src, which
// holds the same frame standardized without a mask (score; the values of
// its missing channels imputed): the standardized values are copied, not
// recomputed, so they are the same numbers.
func (t *Tracker) maskScored(w, src *work, mask []bool) {
	t.standardizeFrom(w, nil, mask, src.z[:t.p])
}

// addConditional adds to the EW variances and covariances of the masked
// channels the part of the update their reconstruction lacks. With d the
// true and d̂ the reconstructed deviation, E[d_m d_nᵀ] = d̂_m d̂_nᵀ + K_mn
// (K the conditional covariance, z units; the reconstruction error is
// uncorrelated with the observed channels, so their cross terms need
// nothing). The update C ← (1 − α)(C + αddᵀ) thus gets α·K_mn·σ_mσ_n
// added before it. The covariance still holds the batch of frames not yet
// folded in (see EW.Flush), which will scale C by their decays; the term
// is divided by those decays (EW.pendingDecay) so that it ends scaled by
// this frame's and the later frames' only, as if the batch had been
// folded in first. The batch is left as it is, so a checkpoint (which
// stores it) restores the same numbers.
//
// Each masked channel's pending decay (a product over the batch) is taken
// once per frame, and its part shared by all channels (the frames with one
// step for every channel, EW.pendingDecayHead) once for all of them, so
// the term costs O(B + k²) for k masked channels and B pending frames
// when every frame had one step (O(k·B + k²) at most).
func (t *Tracker) addConditional(pt *pattern, mask []bool, wt float64) {
	e := t.ew
	k, n := len(pt.miss), e.p
	dec, sd := t.lw.dec[:k], t.lw.sd[:k]
	d0, f := e.pendingDecayHead()
	for x, i := range pt.miss {
		if mask[i] && t.obs[i] {
			dec[x] = e.pendingDecayFrom(i, d0, f)
			sd[x] = math.Sqrt(t.scaleVar(i)) // before this frame's terms (as σ_m, σ_n above; with the scale floor)
		}
	}
	for x, i := range pt.miss {
		if !mask[i] || !t.obs[i] {
			continue
		}
		a := e.wstep(e.count[i]+1, wt)
		si := sd[x]
		di := dec[x]
		for y := x; y < k; y++ { // pt.miss is sorted: the pairs j ≥ i
			j := pt.miss[y]
			if !mask[j] || !t.obs[j] {
				continue
			}
			c := a * pt.kc[x*k+y] * si * sd[y]
			e.cov.Data[i*n+j] += c / (di * dec[y])
			if i == j {
				e.vari[i] += c
			}
		}
	}
}

// ratio is v/l, or 0 when the limit is not finite and positive.
func ratio(v, l float64) float64 {
	if !(l > 0) || math.IsInf(l, 0) || math.IsNaN(v) {
		return 0
	}
	return v / l
}

// huberWeight is Huber's (1964) weight ψ(d)/d = min(1, k/d) at the
// distance d = √r of a statistic over its limit; k ≤ 0 gives 1.
func huberWeight(r, k float64) float64 {
	if k <= 0 || r <= k*k {
		return 1
	}
	return k / math.Sqrt(r)
}

// Recentre moves the EW means of the channels set in which (len p)
// towards their values in x (channel units; a non-finite value leaves the
// channel as it is) as the k-th of a run of frames (k ≥ 1):
//
//	μᵢ ← μᵢ + (xᵢ − μᵢ)/k
//
// so k = 1, 2, …, n over n consecutive frames leaves μᵢ at the plain mean
// of those n readings. Variances and covariances are kept: the model takes
// the current level of those channels as their normal. It is the engine's
// step when an incident is accepted as the plant's new normal (a setpoint
// moved); with a long half-life the means would otherwise take days to
// follow. It allocates nothing.
func (t *Tracker) Recentre(x []float64, which []bool, k int) {
	if len(x) != t.p || len(which) != t.p || k < 1 {
		panic("tracker: Recentre: length mismatch or k < 1")
	}
	t.resetMewmaChannels(which)
	t.resetPersist(which)
	t.resetCreepChannels(which)
	t.lst.reset() // the frames before are standardized by the old means
	for i, w := range which {
		if w && !math.IsNaN(x[i]) && !math.IsInf(x[i], 0) && t.ew.count[i] > 0 {
			t.ew.mean[i] += (x[i] - t.ew.mean[i]) / float64(k)
		}
	}
}
