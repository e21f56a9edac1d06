package pipeline

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/stat"

	"modewatch/tracker"
)

// TestSerialLearnerAutocorr: the one-pass autocorrelation fit learns for a
// channel's profile agrees with a direct computation over the stored
// series, gonum/stat's Pearson correlation of x[k:] with x[:n−k], within
// 0.01 (the two differ only in the means they subtract), at every lag
// kept; lags with fewer than 4k pairs are not kept, and a missing value
// drops its pairs only. Seeded AR(1) series, φ = 0.99, with one frame in
// 50 missing. Invented data.
func TestSerialLearnerAutocorr(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 9))
	const n, phi = 20000, 0.99
	x := make([]float64, n)
	var sl serialLearner
	v := 0.0
	for k := range x {
		v = phi*v + math.Sqrt(1-phi*phi)*rng.NormFloat64()
		x[k] = 50 + v
		if rng.IntN(50) == 0 {
			x[k] = math.NaN()
		}
		sl.add(x[k], !math.IsNaN(x[k]))
	}
	got := sl.autocorr()
	wantLen := 0
	for m := 0; m < tracker.SerialLags && serialMinPairs*tracker.SerialLag(m) <= n*49/50; m++ {
		wantLen = m + 1
	}
	if len(got) != wantLen {
		t.Fatalf("kept %d lags, want %d", len(got), wantLen)
	}
	for m, r := range got {
		k := tracker.SerialLag(m)
		var a, b []float64
		for i := k; i < n; i++ {
			if !math.IsNaN(x[i]) && !math.IsNaN(x[i-k]) {
				a, b = append(a, x[i]), append(b, x[i-k])
			}
		}
		want := stat.Correlation(a, b, nil)
		if !scalar.EqualWithinAbs(r, want, 0.01) {
			t.Errorf("lag %d: ρ = %.4f, gonum/stat %.4f", k, r, want)
		}
	}
	// Constant channel: no autocorrelation.
	var c serialLearner
	for range 100 {
		c.add(3, true)
	}
	if r := c.autocorr(); r != nil {
		t.Errorf("constant channel: %v, want nil", r)
	}
}
