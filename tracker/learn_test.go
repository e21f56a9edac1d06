package tracker

import (
	"math"
	"slices"
	"testing"
	"time"

	"modewatch/tracker/modes"
)

// TestMaskedFaultNotLearned: a 4σ bias on one channel persists for 12 h
// while the tracker keeps learning (half-life 2 h at a 10 s period). With
// the channel masked (learned as its reconstruction from the others) φ
// stays as far over its limit at the end as in the first hour; learning
// the raw frames instead (Step, the comparison) absorbs the fault within
// the first hour and φ stays under its limit. The rest of the unit keeps learning in
// both: the means of the other channels follow a slow common drift.
func TestMaskedFaultNotLearned(t *testing.T) {
	const p, j = 20, 3
	cfg := Config{Period: 10 * time.Second, HalfLife: 2 * time.Hour, Modes: modes.Config{Count: 4}, FlatFrames: -1}
	run := func(masked bool) (first, last float64, drift float64) {
		tr, src := newStream(t, p, cfg)
		var sc Score
		x := make([]float64, p)
		for k := 0; k < 3000; k++ {
			tr.Step(&sc, src.frame(x), nil)
		}
		mask := make([]bool, p)
		mask[j] = true
		const hour = 360
		var r []float64
		for k := 0; k < 12*hour; k++ {
			src.frame(x)
			x[j] += 4 * src.sd[j]
			x[7] += src.sd[7] * float64(k) / (12 * hour) // a slow legitimate move elsewhere
			var err error
			if masked {
				err = tr.StepMasked(&sc, x, nil, mask)
			} else {
				err = tr.Step(&sc, x, nil)
			}
			if err != nil {
				t.Fatal(err)
			}
			r = append(r, sc.Phi/sc.PhiLimit)
		}
		first = median(r[:hour])
		last = median(r[len(r)-hour:])
		drift = (tr.Stats().Mean(7) - src.mean[7]) / src.sd[7]
		return first, last, drift
	}
	f1, l1, d1 := run(true)
	f0, l0, d0 := run(false)
	t.Logf("masked: φ/limit median %.2f in the first hour, %.2f in the last; channel 7 mean followed %.2fσ of 1σ", f1, l1, d1)
	t.Logf("raw:    φ/limit median %.2f in the first hour, %.2f in the last; channel 7 mean followed %.2fσ", f0, l0, d0)
	if l1 < 0.8*f1 || l1 < 1.5 {
		t.Errorf("masked: the fault was learned: φ/limit %.2f → %.2f", f1, l1)
	}
	if l0 > 1 || l0 > 0.5*l1 {
		t.Errorf("raw learning did not absorb the fault (%.2f → %.2f): the comparison shows nothing", f0, l0)
	}
	if d1 < 0.7 {
		t.Errorf("masked: the unmasked channel 7 did not follow its move (%.2fσ of 1σ)", d1)
	}
}

func median(v []float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	return s[len(s)/2]
}

// TestHuberWeight checks the weight against Huber's ψ(d)/d = min(1, k/d)
// (Huber 1964) and that a gross outlier (50σ on one channel, about 15
// times the distance of the φ limit) moves the learned mean by the
// weight's share only (k/d ≈ 0.2 at the default k = 3).
func TestHuberWeight(t *testing.T) {
	for _, c := range []struct{ r, k, want float64 }{
		{0.5, 1.5, 1}, {2.25, 1.5, 1}, {9, 1.5, 0.5}, {100, 1, 0.1}, {100, -1, 1},
	} {
		if got := huberWeight(c.r, c.k); math.Abs(got-c.want) > 1e-15 {
			t.Errorf("huberWeight(%v, %v) = %v, want %v", c.r, c.k, got, c.want)
		}
	}
	const p = 12
	cfg := Config{Period: time.Second, HalfLife: time.Hour, Modes: modes.Config{Count: 3}, FlatFrames: -1}
	move := func(robust float64) float64 {
		c := cfg
		c.Robust = robust
		tr, src := newStream(t, p, c)
		var sc Score
		x := make([]float64, p)
		for k := 0; k < 2000; k++ {
			tr.Step(&sc, src.frame(x), nil)
		}
		m0 := tr.Stats().Mean(0)
		src.frame(x)
		x[0] += 50 * src.sd[0]
		tr.Step(&sc, x, nil)
		if robust > 0 && !(sc.LearnWeight < 0.25) {
			t.Errorf("a 50σ frame was learned with weight %v", sc.LearnWeight)
		}
		return math.Abs(tr.Stats().Mean(0)-m0) / src.sd[0]
	}
	full, robust := move(-1), move(DefaultRobust)
	t.Logf("a 50σ frame moves the mean by %.4fσ learned fully, %.4fσ with the Huber weight", full, robust)
	if robust > 0.25*full {
		t.Errorf("down-weighting: %.4fσ vs %.4fσ", robust, full)
	}
}

// TestStepMaskedAllocs: learning with a mask allocates nothing per frame
// once its pattern is cached (the pattern is recomputed after each refresh
// into preallocated storage).
func TestStepMaskedAllocs(t *testing.T) {
	const p = 30
	tr, xs, scp := allocTracker(t)
	sc := *scp
	mask := make([]bool, p)
	mask[2], mask[9] = true, true
	sc.Missing = make([]int, 0, p)
	tr.StepMasked(&sc, xs[0], nil, mask)
	if d := mallocsOver(200, func(k int) {
		if err := tr.StepMasked(&sc, xs[k%64], nil, mask); err != nil {
			t.Fatal(err)
		}
	}); d != 0 {
		t.Errorf("200 masked frames (25 refreshes) made %d allocations", d)
	}
}

// TestConditionalWithBatch: the conditional-covariance term added while
// frames wait in the covariance batch ends up as if the batch had been
// folded in first (EW.pendingDecay): two trackers fed the same masked
// frames, one flushing its batch before every frame, hold the same
// covariance to rounding.
func TestConditionalWithBatch(t *testing.T) {
	const p = 12
	cfg := Config{Period: time.Second, HalfLife: 10 * time.Minute, Batch: 16, Modes: modes.Config{Count: 3}, FlatFrames: -1}
	a, src := newStream(t, p, cfg)
	b, _ := newStream(t, p, cfg)
	var sa, sb Score
	x := make([]float64, p)
	mask := make([]bool, p)
	mask[2], mask[5] = true, true
	for k := 0; k < 900; k++ {
		src.frame(x)
		if k > 300 {
			x[2] += 3 * src.sd[2]
		}
		if err := a.StepMasked(&sa, x, nil, mask); err != nil {
			t.Fatal(err)
		}
		b.ew.Flush()
		if err := b.StepMasked(&sb, x, nil, mask); err != nil {
			t.Fatal(err)
		}
	}
	a.ew.Flush()
	b.ew.Flush()
	worst := 0.0
	for i, v := range a.ew.cov.Data {
		w := b.ew.cov.Data[i]
		worst = math.Max(worst, math.Abs(v-w)/math.Max(math.Abs(w), 1e-300))
	}
	if worst > 1e-9 {
		t.Errorf("covariances differ by %g relative", worst)
	}
}
