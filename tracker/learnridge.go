package tracker

import "slices"

// LearnRidgeRule selects the ridge of the reconstruction that
// [Tracker.StepMasked] learns in place of masked channels (Config.LearnRidge).
type LearnRidgeRule int

// Learning ridge rules.
const (
	// LearnRidgeResidual (the default) reconstructs masked channels for
	// learning under the residual statistic's ridge ε_R (ResidualRidge),
	// from the factor of A + ε_R·I that the residual statistic forms at
	// each refresh anyway, when the tracker has it (Residual or Variance
	// on); otherwise under Ridge, as LearnRidgeMissing. An open incident
	// then costs no factorization of its own: one O(p³/6) factor per
	// refresh instead of two. Scoring is unchanged: frames with missing
	// channels are still scored under Ridge.
	LearnRidgeResidual LearnRidgeRule = iota
	// LearnRidgeMissing reconstructs masked channels for learning under
	// the missing-data model's ridge ε (Ridge), from that model's own
	// factor of A + εI (factorRidge), formed at the first masked frame
	// after each refresh.
	LearnRidgeMissing
)

// learnSlots is the number of masked-learning patterns cached between
// refreshes on the residual statistic's factor (a frame's masked set is
// the incidents' channels plus its missing and stuck ones, which changes
// seldom within a refresh period).
const learnSlots = 4

// learnCache holds the patterns of masked learning built on the residual
// statistic's factor since the last refresh (model.setLoadings empties
// it): slots[:n] are valid, next is the round-robin replacement.
type learnCache struct {
	slots   []*pattern
	n, next int
}

// learnPattern returns the reduced model under which learnFrame
// reconstructs and weighs a frame whose channels miss (sorted) are masked
// or missing. With LearnRidgeResidual and a residual statistic whose
// factor of the current A was formed (resStat.ok) under a ridge other than
// Ridge, it is the pattern of miss under ε_R, computed from that factor
// (precisionRowsOf, conditionalOf: the same arithmetic as for Ridge, on the
// other factor) and cached until the next refresh. Otherwise it is the
// missing-data model's pattern (lookupPattern), as for scoring.
//
// Under ε_R the reconstruction ẑ_m = A_mo(A_oo + ε_R·I)⁻¹z_o is a ridge
// regression of the masked channels on the others that shrinks them along
// directions the model holds to within √ε_R of a standard deviation, where
// the residual statistic's Ω caps their weight at 1/ε_R too; its
// conditional covariance K = (Ω_mm)⁻¹ − ε_R·I (addConditional) is the
// matching one. The slots are allocated at the first masked frame in the
// tracker's life that uses them (as factorRidge's buffers); after that
// this allocates nothing.
func (t *Tracker) learnPattern(miss []int) (*pattern, error) {
	m := t.mdl
	rs := t.rs
	if t.cfg.LearnRidge != LearnRidgeResidual || rs == nil || !rs.ok || rs.ridge == t.cfg.Ridge || len(miss) == 0 {
		return m.lookupPattern(miss, &t.ls, t.cfg.Ridge, t.cfg.PatternCache)
	}
	c := &m.learn
	for _, pt := range c.slots[:c.n] {
		if slices.Equal(pt.miss, miss) {
			return pt, nil
		}
	}
	if c.slots == nil {
		c.slots = make([]*pattern, learnSlots)
		for i := range c.slots {
			c.slots[i] = m.newPattern(min(m.p, patternPrealloc))
		}
	}
	var pt *pattern
	if c.n < len(c.slots) {
		pt = c.slots[c.n]
		c.n++
	} else {
		pt = c.slots[c.next]
		c.next = (c.next + 1) % len(c.slots)
	}
	pt.setMiss(miss, m.p)
	if err := m.conditionalOf(pt, rs.factorU(), rs.panel, rs.ridge); err != nil {
		pt.miss = append(pt.miss[:0], -1) // unusable for lookups until rewritten
		return nil, err
	}
	m.computePattern(pt, &t.ls)
	return pt, nil
}
