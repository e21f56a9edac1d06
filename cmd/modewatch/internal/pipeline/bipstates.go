package pipeline

import (
	"math"

	"modewatch/tracker"
)

// Scoring by found operating states (units[].state: auto). fit finds the
// states as the components of a Gaussian mixture on the leading mode
// scores and learns one model per state (autostates.go). A frame is
// learned by the model of its most probable component. How it is scored
// is model.state_scoring:
//
//   - most_probable: by the most probable component's model alone, its
//     statistics against its limits.
//   - posterior (tracker.DefaultStateScoring): every statistic is the
//     Bayesian inference combination over all the states' models (Yu &
//     Qin 2008, AIChE J. 54(7)), weighted by the frame's posterior
//     probability of each state:
//
//     BIP = Σₖ P(Cₖ | x) · P_L⁽ᵏ⁾(x),   alarm when BIP > 1 − α,
//
//     with P_L⁽ᵏ⁾ the local probability of the statistic under state k's
//     model (a scaled χ² matched at the state's limit; tracker.BIPRatio
//     has the formulas), reported on the most probable state's scale as
//     value = ρ*·limit, so that value > limit exactly when BIP > 1 − α.
//     The degrees of freedom per statistic: T² the state's modes r, SPE
//     and the residual statistic its residual dimensions, φ both, the
//     variance and relation statistics 1. A frame between two states (a
//     transition, a state's edge) is then judged by both, in proportion;
//     a frame deep inside one state is judged by it alone, as before.
//     The contributions, expected values and location stay those of the
//     most probable state's model, and the transition hold-off is learned
//     under the same rule.
//
// Each found state's model scores every frame under posterior scoring (K
// evaluations a frame instead of one), for found-state units only.

// posteriorScoring reports whether the unit scores found states by their
// posterior (model.state_scoring).
func (u *Unit) posteriorScoring() bool {
	return u.p.cfg.ModelFor(u.Name).StateScoring == tracker.StateScoringPosterior
}

// bipWork is the per-unit work of posterior scoring, sized once.
type bipWork struct {
	post  []float64           // K posteriors
	score []tracker.Score     // per state model: its score of the frame
	tails []tracker.StateTail // per state model
	q     *tracker.ChiQuantiles
}

// posteriorScore replaces the statistics of u.score (the most probable
// state's) by their posterior-weighted combination over the found states'
// models. It allocates only the first time.
func (u *Unit) posteriorScore() {
	s := u.states
	if s == nil || s.cur < 0 {
		return
	}
	s.combine(&u.score, s.cur, u.x, u.miss)
}

// combine replaces the statistics of cur, the score of frame x by state
// model ci, by their posterior-weighted combination over every found
// state's model (posterior scoring; otherwise it does nothing). It allocates only the first time.
func (s *unitStates) combine(cur *tracker.Score, ci int, x []float64, miss []bool) {
	if !s.posterior || s.auto == nil || len(s.models) < 2 || !cur.Ready || ci < 0 || ci >= len(s.models) {
		return
	}
	a := s.auto
	k := a.Mixture.K()
	w := s.bip
	if w == nil || len(w.post) != k || len(w.score) < len(s.models) {
		w = &bipWork{post: make([]float64, k), score: make([]tracker.Score, len(s.models)+1),
			tails: make([]tracker.StateTail, 0, len(s.models)+1)}
		s.bip = w
	}
	a.classifyScores(x, miss)
	a.Mixture.PosteriorTo(w.post, a.score)
	scores := w.score[:len(s.models)]
	var ok stateSet
	for i, m := range s.models {
		c := int(m.key)
		if c < 0 || c >= k || !(w.post[c] > 0) {
			continue
		}
		if i == ci {
			ok.set(i)
			continue
		}
		if m.tr.P() != len(x) || m.tr.State() == tracker.StateWarmUp {
			continue
		}
		if err := m.tr.Evaluate(&scores[i], x, miss); err != nil || !scores[i].Ready {
			continue
		}
		ok.set(i)
	}
	ctr := s.models[ci].tr
	if alpha := ctr.Config().Alpha; w.q == nil || w.q.Alpha() != alpha {
		w.q = tracker.NewChiQuantiles(alpha, 2*len(x)+2) // h ≤ r + residual dimensions ≤ 2p
	}
	for st := 0; st < nStatistics; st++ {
		cv, cl := statFields(cur, st)
		lim := *cl
		if !(lim > 0) || math.IsInf(lim, 0) {
			continue
		}
		w.tails = w.tails[:0]
		for i, m := range s.models {
			if !ok.has(i) {
				continue
			}
			sc := &scores[i]
			if i == ci {
				sc = cur
			}
			v, l := statFields(sc, st)
			if !(*l > 0) || math.IsInf(*l, 0) {
				continue
			}
			w.tails = append(w.tails, tracker.StateTail{Posterior: w.post[int(m.key)], Ratio: *v / *l,
				DOF: statDOF(sc, m.tr, st)})
		}
		if r := tracker.BIPRatio(w.tails, statDOF(cur, ctr, st), w.q); !math.IsNaN(r) {
			*cv = r * lim
		}
	}
}

// statFields returns the value and the limit of statistic slot st of s
// (statNames' order).
func statFields(s *tracker.Score, st int) (v, lim *float64) {
	vs := [...]*float64{&s.T2, &s.SPE, &s.Phi, &s.Residual, &s.Variance, &s.Relation, &s.Mewma, &s.Creep}
	lims := [...]*float64{&s.T2Limit, &s.SPELimit, &s.PhiLimit, &s.ResidualLimit, &s.VarianceLimit, &s.RelationLimit, &s.MewmaLimit, &s.CreepLimit}
	st = min(max(st, 0), len(vs)-1)
	return vs[st], lims[st]
}

// statDOF returns the degrees of freedom of statistic slot st under the
// model tr that gave score s (see the scoring comment above).
func statDOF(s *tracker.Score, tr *tracker.Tracker, st int) float64 {
	r, q := float64(s.Modes), float64(tr.ResidualDims())
	switch st {
	case 0:
		return r
	case 1, 3, slotMewma:
		return q
	case 2:
		return r + q
	}
	return 1
}

// stateSet is a small bit set of state indices (tracker.MaxStates ≤ 64).
type stateSet uint64

func (b *stateSet) set(i int)     { *b |= 1 << uint(i) }
func (b stateSet) has(i int) bool { return b&(1<<uint(i)) != 0 }
