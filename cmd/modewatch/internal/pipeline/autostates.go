package pipeline

import (
	"fmt"
	"math"
	"time"

	"modewatch/configs"
	"modewatch/tracker"
)

// Found operating states (units[].state: auto). fit first learns the unit
// as one model while it keeps the unit's frames (a bounded, evenly thinned
// sample); at the end it projects them on the leading modes of that model,
// fits Gaussian mixtures of 1 … 6 components to the scores and keeps the
// one with the smallest BIC (Zhao, Zhang & Xu 2004; Yu & Qin 2008). With
// two or more components, each becomes a state: the kept frames are
// learned again, each by the model of its state, and the unit is saved
// with its states like one with a state channel. A frame is classified by
// its most probable component.

const (
	// autoMaxValues bounds the values kept per unit while fitting (frames
	// × channels); beyond it every other frame is dropped and the stride
	// doubles.
	autoMaxValues = 1 << 22
	// autoScores is the number of leading modes whose scores the mixture
	// is fitted to.
	autoScores = 4
	// autoPoints bounds the points of the mixture fit (evenly spaced).
	autoPoints = 5000
)

// autoStates classifies frames into found states: standardize, project
// on the leading loadings, most probable mixture component.
type autoStates struct {
	Means    []float64        `json:"means"`
	SDs      []float64        `json:"sds"`
	Loadings [][]float64      `json:"loadings"` // r × p
	Mixture  *tracker.Mixture `json:"mixture"`
	score    []float64        // work, r
}

// check validates a found-state classifier for p channels and sizes its
// work space.
func (a *autoStates) check(p int) error {
	m := a.Mixture
	if len(a.Means) != p || len(a.SDs) != p || m == nil || len(a.Loadings) != m.D || m.K() < 2 || m.K() > tracker.MaxStates {
		return fmt.Errorf("found operating states: classifier does not fit %d channels", p)
	}
	for _, l := range a.Loadings {
		if len(l) != p {
			return fmt.Errorf("found operating states: loadings of %d channels, want %d", len(l), p)
		}
	}
	for k := range m.Weight {
		if len(m.Mean[k]) != m.D || len(m.InvChol[k]) != m.D*m.D {
			return fmt.Errorf("found operating states: component %d malformed", k)
		}
	}
	a.score = make([]float64, m.D)
	return nil
}

// classify returns the found state of frame x (missing channels at their
// mean). It allocates nothing.
func (a *autoStates) classify(x []float64, miss []bool) float64 {
	a.classifyScores(x, miss)
	return float64(a.Mixture.Classify(a.score))
}

// autoBuffer keeps a unit's frames while fitting.
type autoBuffer struct {
	p      int
	x      []float64
	miss   []bool
	stride int
	k      int
	gate   *gateScreen // looking for a status channel (gatestates.go), nil: found states
}

// add keeps frame x (every stride-th).
func (b *autoBuffer) add(x []float64, miss []bool) {
	if len(x) != b.p {
		*b = autoBuffer{p: len(x), stride: 1, gate: b.gate} // the channels changed: start again
	}
	if b.k++; (b.k-1)%b.stride != 0 {
		return
	}
	b.x = append(b.x, x...)
	b.miss = append(b.miss, miss...)
	if len(b.x) > autoMaxValues {
		n := len(b.x) / b.p
		j := 0
		for i := 0; i < n; i += 2 {
			copy(b.x[j*b.p:(j+1)*b.p], b.x[i*b.p:(i+1)*b.p])
			copy(b.miss[j*b.p:(j+1)*b.p], b.miss[i*b.p:(i+1)*b.p])
			j++
		}
		b.x, b.miss = b.x[:j*b.p], b.miss[:j*b.p]
		b.stride *= 2
	}
}

func (b *autoBuffer) frames() int { return len(b.x) / max(b.p, 1) }

// isAuto reports whether the configured unit name finds its states.
func (p *Pipeline) isAuto(name string) bool {
	i := p.cfg.Unit(name)
	return i >= 0 && p.cfg.Units[i].State == configs.StateAuto
}

// findStates fits the found-state classifier of a unit fitted as one model
// and, with two or more states, learns the kept frames again by state.
// It reports how many states it found (1: the unit stays one model).
func (u *Unit) findStates() (int, error) {
	b := u.autoBuf
	u.autoBuf = nil
	if b == nil || b.frames() < 10 || b.p != u.tr.P() {
		return 1, nil
	}
	if err := u.tr.Refresh(); err != nil {
		return 1, err
	}
	p := b.p
	a := &autoStates{Means: make([]float64, p), SDs: make([]float64, p)}
	u.tr.Stats().MeanTo(a.Means)
	u.tr.Stats().VarTo(a.SDs)
	for i, v := range a.SDs {
		a.SDs[i] = math.Sqrt(math.Max(v, 0))
	}
	ms := u.tr.Modes()
	for j := 0; j < ms.Count() && j < autoScores; j++ {
		a.Loadings = append(a.Loadings, append([]float64(nil), ms.Mode(j).Loadings...))
	}
	if len(a.Loadings) == 0 {
		return 1, nil
	}
	a.score = make([]float64, len(a.Loadings))
	n := b.frames()
	step := max(1, n/autoPoints)
	var pts [][]float64
	for f := 0; f < n; f += step {
		a.classifyScores(b.x[f*p:(f+1)*p], b.miss[f*p:(f+1)*p])
		pts = append(pts, append([]float64(nil), a.score...))
	}
	mix, err := tracker.FitMixture(pts, tracker.MixtureConfig{MaxK: min(6, tracker.MaxStates), Seed: 1})
	if err != nil {
		return 1, err
	}
	if mix.K() < 2 {
		return 1, nil
	}
	a.Mixture = mix
	// Learn the kept frames again, each by the model of its state.
	s := newStates(configs.StateAuto, nil)
	s.auto = a
	s.posterior = u.posteriorScoring()
	s.noWindows = b.stride > 1 // thinned: transitions cannot be timed
	u.states = s
	for f := 0; f < n; f++ {
		copy(u.x, b.x[f*p:(f+1)*p])
		copy(u.miss, b.miss[f*p:(f+1)*p])
		if !u.enterKey(a.classify(u.x, u.miss), true, time.Time{}) {
			continue
		}
		if err := u.tr.Step(&u.score, u.x, u.miss); err == nil {
			s.models[s.cur].frames++
		}
	}
	return mix.K(), nil
}

// classifyScores fills a.score with the leading scores of x.
func (a *autoStates) classifyScores(x []float64, miss []bool) {
	for j, l := range a.Loadings {
		s := 0.0
		for i, w := range l {
			if miss[i] || a.SDs[i] == 0 || math.IsNaN(x[i]) {
				continue
			}
			s += w * (x[i] - a.Means[i]) / a.SDs[i]
		}
		a.score[j] = s
	}
}
