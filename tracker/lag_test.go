package tracker

import (
	"math"
	"testing"
	"time"

	"modewatch/tracker/modes"
)

// TestLagSeesDrift: a channel drifts by 0.02σ per frame for 400 frames
// on a model that keeps learning (half-life 200 frames). Scored by a
// model that lags 300 frames behind (N-step-ahead scoring, Wang, Kruger &
// Irwin 2005), φ goes over its limit no later and stays over it far
// longer than with the model learning every frame at once, which follows
// the drift.
func TestLagSeesDrift(t *testing.T) {
	const p, j = 15, 4
	run := func(lag int) (first, over int) {
		cfg := Config{Period: time.Second, HalfLife: 200 * time.Second, Modes: modes.Config{Count: 3}, FlatFrames: -1, Lag: lag}
		tr, src := newStream(t, p, cfg)
		var sc Score
		x := make([]float64, p)
		for k := 0; k < 2000; k++ {
			tr.Step(&sc, src.frame(x), nil)
		}
		first = -1
		for k := 0; k < 400; k++ {
			src.frame(x)
			x[j] += 0.02 * float64(k) * src.sd[j]
			if err := tr.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			if sc.Phi > sc.PhiLimit {
				over++
				if first < 0 && over >= 5 {
					first = k
				}
			}
		}
		return first, over
	}
	f0, o0 := run(0)
	f1, o1 := run(300)
	t.Logf("no lag: 5th frame over the limit at %d, %d frames over; lag 300: at %d, %d over", f0, o0, f1, o1)
	if f1 < 0 || (f0 >= 0 && f1 > f0) || o1 < 3*o0 {
		t.Errorf("the lagged model does not see the drift as soon and for much longer")
	}
}

// TestLagCheckpoint: a tracker with frames waiting in its lag ring restores
// from its checkpoint and goes on bit for bit; the ring costs no
// allocation per frame.
func TestLagCheckpoint(t *testing.T) {
	const p = 9
	cfg := Config{Period: time.Second, HalfLife: 10 * time.Minute, WarmUp: 40, RefreshEvery: 8, Batch: 16, Modes: modes.Config{Count: 2}, Lag: 25}
	for _, n := range []int{10, 110} { // ring filling, ring full
		tr, src, ck := steppedTracker(t, p, cfg, n)
		x := make([]float64, p)
		tr2 := restoreTracker(t, p, cfg, ck)
		var s1, s2 Score
		mask := make([]bool, p)
		mask[3] = true
		for k := 0; k < 200; k++ {
			src.frame(x)
			m := mask
			if k%3 == 0 {
				m = nil
			}
			tr.StepMasked(&s1, x, nil, m)
			tr2.StepMasked(&s2, x, nil, m)
			if s1.Ready != s2.Ready || (s1.Ready && (s1.T2 != s2.T2 || s1.SPE != s2.SPE || math.IsNaN(s1.Phi))) {
				t.Fatalf("after %d frames: frame %d differs after the restore", n, k)
			}
		}
		if a := testing.AllocsPerRun(100, func() { tr.StepMasked(&s1, src.frame(x), nil, mask) }); a != 0 {
			t.Errorf("a lagged frame allocates %v times", a)
		}
	}
	// A lag of 0 writes no frames, and a checkpoint with waiting frames is
	// refused by a tracker without lag.
	_, _, ck := steppedTracker(t, p, cfg, 10)
	c0 := cfg
	c0.Lag = 0
	tr0, _ := New(p, c0)
	if err := tr0.UnmarshalBinary(ck); err == nil {
		t.Error("a checkpoint with a lag restored into a tracker without one")
	}
}
