package pipeline

import (
	"math"
	"testing"

	"modewatch/tracker"
)

// TestFoundStatesPosterior compares the two scoring rules of found states
// on the two-state plant of TestFoundStates (Gaussian load, state: auto;
// behaviour test): the posterior-weighted statistics (Yu & Qin 2008)
// detect the in-state bias in at least 3 of its 4 periods, as the most
// probable state's model does, and raise no more false alerts; a frame
// deep inside one state (posterior ≈ 1) keeps that state's statistics.
func TestFoundStatesPosterior(t *testing.T) {
	fault := func(k int) bool { return k >= sNormal && sState(k) == 0 && k%1080 >= 360 }
	run := func(rule string) (hit, false_ int, over float64, m *ModelFile) {
		t.Helper()
		cfg := sConfig(t, "model: {state_scoring: "+rule+"}\nunits: [{name: mix, state: auto}]\n")
		starts, over, m := sRunLag(t, cfg, nil, nil, fault, 0, true, nil)
		for _, s := range starts {
			if fault(int(s.Sub(sStart) / sPeriod)) {
				hit++
			} else {
				false_++
			}
		}
		return hit, false_, over, m
	}
	mpHit, mpFalse, mpOver, _ := run(tracker.StateScoringMostProbable)
	bpHit, bpFalse, bpOver, m := run(tracker.StateScoringPosterior)
	t.Logf("most probable: %d alerts in the fault, %d outside, φ over its limit in %.3f of fault frames", mpHit, mpFalse, mpOver)
	t.Logf("posterior:     %d alerts in the fault, %d outside, φ over its limit in %.3f of fault frames", bpHit, bpFalse, bpOver)
	if bpHit < 3 || mpHit < 3 {
		t.Errorf("alerts during the 4 fault periods: posterior %d, most probable %d; want ≥ 3 each", bpHit, mpHit)
	}
	if bpFalse > mpFalse {
		t.Errorf("posterior scoring: %d false alerts, most probable %d", bpFalse, mpFalse)
	}

	// One frame deep inside state 0 (the load at its mean): the posterior
	// of the other state is negligible and the combination leaves the
	// statistics as the state's own.
	var mix *ModelUnit
	for i := range m.Units {
		if m.Units[i].Name == "mix" {
			mix = &m.Units[i]
		}
	}
	if mix == nil || mix.States == nil || mix.States.Auto == nil {
		t.Fatalf("no found states: %+v", mix)
	}
	s := foundStates(t, mix)
	p := len(mix.Channels)
	x, miss := []float64{0.05, -0.1, 0.02, 0.3}, make([]bool, p)
	ci := s.find(s.auto.classify(x, miss))
	var own, comb tracker.Score
	if err := s.models[ci].tr.Evaluate(&own, x, miss); err != nil || !own.Ready {
		t.Fatalf("evaluate: %v (ready %v)", err, own.Ready)
	}
	if err := s.models[ci].tr.Evaluate(&comb, x, miss); err != nil {
		t.Fatal(err)
	}
	s.combine(&comb, ci, x, miss)
	t.Logf("state %d: T² %.4f → %.4f, SPE %.4f → %.4f, φ %.4f → %.4f", ci, own.T2, comb.T2, own.SPE, comb.SPE, own.Phi, comb.Phi)
	for _, c := range [][2]float64{{own.T2, comb.T2}, {own.SPE, comb.SPE}, {own.Phi, comb.Phi}} {
		if math.Abs(c[0]-c[1]) > 1e-6*math.Max(1, c[0]) {
			t.Errorf("deep inside a state the combination moved a statistic %v → %v", c[0], c[1])
		}
	}
	if n := testing.AllocsPerRun(50, func() { s.combine(&comb, ci, x, miss) }); n != 0 {
		t.Errorf("combining a frame allocates %v times", n)
	}
}

// foundStates rebuilds the found states of a fitted unit (models held
// fixed), scored by their posterior.
func foundStates(tb testing.TB, mix *ModelUnit) *unitStates {
	tb.Helper()
	p := len(mix.Channels)
	settings, err := mix.Settings.model()
	if err != nil {
		tb.Fatal(err)
	}
	tcfg, err := TrackerConfig(settings, sPeriod, p, true)
	if err != nil {
		tb.Fatal(err)
	}
	s := newStates(mix.States.Channel, nil)
	s.auto = mix.States.Auto
	s.posterior = true
	if err := s.auto.check(p); err != nil {
		tb.Fatal(err)
	}
	for _, sm := range mix.States.Models {
		tr, err := tracker.New(p, tcfg)
		if err != nil {
			tb.Fatal(err)
		}
		if err := restoreState(tr, sm.State); err != nil {
			tb.Fatal(err)
		}
		s.models = append(s.models, &stateModel{key: sm.Key, tr: tr})
	}
	return s
}

// BenchmarkFoundStateScoring is the scoring of one frame of the two-state
// plant's found states (classify, the most probable state's score) by the
// most probable state alone and by the posterior combination, which also
// scores the frame by the other state's model: compare the two with
// benchstat.
func BenchmarkFoundStateScoring(b *testing.B) {
	cfg := sConfig(b, "units: [{name: mix, state: auto}]\n")
	m := fitBytes(b, cfg, sPlant(0, sNormal, nil, nil, 1, 0, true))
	var mix *ModelUnit
	for i := range m.Units {
		if m.Units[i].Name == "mix" {
			mix = &m.Units[i]
		}
	}
	if mix == nil || mix.States == nil || mix.States.Auto == nil {
		b.Fatal("no found states")
	}
	s := foundStates(b, mix)
	x, miss := []float64{0.5, 0.4, 0.3, 0.2}, make([]bool, 4)
	var sc tracker.Score
	for _, rule := range []string{tracker.StateScoringMostProbable, tracker.StateScoringPosterior} {
		b.Run(rule, func(b *testing.B) {
			s.posterior = rule == tracker.StateScoringPosterior
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				ci := s.find(s.auto.classify(x, miss))
				if err := s.models[ci].tr.Evaluate(&sc, x, miss); err != nil {
					b.Fatal(err)
				}
				s.combine(&sc, ci, x, miss)
			}
			benchSink = sc.Phi
		})
	}
}
