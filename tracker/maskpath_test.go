package tracker

import (
	"math"
	"runtime"
	"testing"
	"time"

	"modewatch/tracker/modes"
)

// maskScored (the learning pass reusing the scoring pass's standardized
// frame) gives exactly what standardize gives for the same frame and mask:
// the same values and the same missing list, with a channel missing, a
// flat-lined (stuck) one and masked ones among them.
func TestMaskScoredEqualsStandardize(t *testing.T) {
	const p = 30
	tr, src := newStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 80, RefreshEvery: 8, Batch: 4,
		FlatFrames: 5, Modes: modes.Config{Count: 4, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 6}}}})
	var sc Score
	xs := src.frames(64, p)
	for k := 0; k < 200; k++ {
		if err := tr.Step(&sc, xs[k%64], nil); err != nil {
			t.Fatal(err)
		}
	}
	miss := make([]bool, p)
	miss[4] = true
	mask := make([]bool, p)
	mask[2], mask[9], mask[17] = true, true, true
	for k := 0; k < 12; k++ {
		x := append([]float64(nil), xs[k]...)
		x[11] = 3.25 // flat from the 5th frame on: stuck
		if err := tr.Evaluate(&sc, x, miss); err != nil {
			t.Fatal(err)
		}
		w1, w2 := newWork(p, tr.mdl.maxR), newWork(p, tr.mdl.maxR)
		tr.standardize(w1, x, mask)
		tr.maskScored(w2, tr.w, mask)
		if len(w1.miss) != len(w2.miss) {
			t.Fatalf("frame %d: missing %v, reused %v", k, w1.miss, w2.miss)
		}
		for j := range w1.miss {
			if w1.miss[j] != w2.miss[j] {
				t.Fatalf("frame %d: missing %v, reused %v", k, w1.miss, w2.miss)
			}
		}
		for i := range w1.z {
			if w1.z[i] != w2.z[i] {
				t.Fatalf("frame %d, channel %d: z %v, reused %v", k, i, w1.z[i], w2.z[i])
			}
		}
		if err := tr.Step(&sc, x, miss); err != nil { // advance the flat-line counter
			t.Fatal(err)
		}
	}
	if !tr.stuck[11] {
		t.Error("channel 11 never counted as stuck: the test does not cover it")
	}
}

// Zero allocations per masked frame with a wide mask (24 of 60 channels,
// more than a pattern slot holds before it grows): after the first masked
// frame, which grows the slot once, 200 frames with a refresh every 8
// (each rebuilding the factor, the precision rows, H and K) allocate
// nothing (runtime.MemStats, since testing.AllocsPerRun would round an
// allocation every few frames down to 0).
func TestStepMaskedWideAllocs(t *testing.T) {
	const p = 60
	tr, xs, scp := allocTrackerP(t, p)
	sc := *scp
	mask := make([]bool, p)
	for i := 1; i < p; i += 5 {
		mask[i] = true
	}
	mask[2], mask[3], mask[58], mask[59] = true, true, true, true // 16 so far
	for i := 4; i < 40; i += 5 {
		mask[i] = true
	}
	n := 0
	for _, m := range mask {
		if m {
			n++
		}
	}
	if n != 24 {
		t.Fatalf("%d masked channels, want 24", n)
	}
	sc.Missing = make([]int, 0, p)
	sc.Excluded = make([]int, 0, p)
	sc.Warming = make([]int, 0, p)
	maskedMallocs(t, tr, &sc, xs, mask, "200 frames with 24 channels masked (25 refreshes)")
}

// maskedMallocs steps tr through one masked frame (which may size storage
// once), then checks that 200 more masked frames of xs (64 frames, a
// refresh every 8 in the callers' trackers) allocate nothing
// (mallocsOver) and that they were learned; what names them in the error.
func maskedMallocs(t *testing.T, tr *Tracker, sc *Score, xs [][]float64, mask []bool, what string) {
	t.Helper()
	if err := tr.StepMasked(sc, xs[0], nil, mask); err != nil {
		t.Fatal(err)
	}
	if d := mallocsOver(200, func(k int) {
		if err := tr.StepMasked(sc, xs[k%64], nil, mask); err != nil {
			t.Fatal(err)
		}
	}); d != 0 {
		t.Errorf("%s made %d allocations", what, d)
	}
	if sc.LearnWeight == 0 {
		t.Error("the masked frames were not learned")
	}
}

// mallocsOver returns the heap allocations made by n calls of step(k),
// k = 0…n−1, on one OS thread (every allocation counted, where
// testing.AllocsPerRun would round a few over many runs down to 0): the
// fewest of three passes, since an allocation of the code under test
// shows in every pass while a stray one of the runtime (seen once in CI:
// 1 in 200 frames) does not.
func mallocsOver(n int, step func(k int)) uint64 {
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(1))
	best := uint64(math.MaxUint64)
	for range 3 {
		var ms0, ms1 runtime.MemStats
		runtime.ReadMemStats(&ms0)
		for k := 0; k < n; k++ {
			step(k)
		}
		runtime.ReadMemStats(&ms1)
		best = min(best, ms1.Mallocs-ms0.Mallocs)
	}
	return best
}
