package cli

import (
	"math"
	"testing"
)

// TestPoissonInterval checks the exact 95 % interval of a Poisson count
// (Garwood 1936, Biometrika 28, 437–442) against the values of the
// standard tables of exact Poisson confidence limits, quoted from memory to
// 3 decimals (common practice; e.g. 0 events → upper limit 3.689):
// 0 → [0, 3.689], 1 → [0.025, 5.572], 4 → [1.090, 10.242],
// 10 → [4.795, 18.390].
func TestPoissonInterval(t *testing.T) {
	for _, c := range []struct {
		k      int
		lo, hi float64
	}{{0, 0, 3.689}, {1, 0.025, 5.572}, {4, 1.090, 10.242}, {10, 4.795, 18.390}} {
		lo, hi := poissonInterval(c.k, 1)
		if math.Abs(lo-c.lo) > 0.0015 || math.Abs(hi-c.hi) > 0.0015 {
			t.Errorf("k=%d: [%.4f, %.4f], want [%.3f, %.3f]", c.k, lo, hi, c.lo, c.hi)
		}
		// Over 5 days the rate's interval is the count's divided by 5.
		lo5, hi5 := poissonInterval(c.k, 5)
		if math.Abs(lo5*5-lo) > 1e-12 || math.Abs(hi5*5-hi) > 1e-12 {
			t.Errorf("k=%d over 5 days: [%g, %g], want a fifth of [%g, %g]", c.k, lo5, hi5, lo, hi)
		}
	}
}
