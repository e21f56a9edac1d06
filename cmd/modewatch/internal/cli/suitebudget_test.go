package cli

import (
	"math"
	"strings"
	"testing"

	"modewatch/cmd/modewatch/internal/pipeline"
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

// TestUnitBudget: the suite's per-unit comparison and its line. A rate of
// 0.25 a day known exactly (RateSE 0) predicts over 5 days a Poisson
// count of mean 1.25: P(N ≤ 3) = 0.9617 and P(N ≤ 4) = 0.9909 (hand
// computation), so [0, 4]; no alert lies inside it though not inside the
// rate's interval [0.1, 0.6], and 5 alerts lie outside. With a standard
// error equal to the rate (gamma shape 1: the count is geometric, q =
// 1/2.25), the upper end is the smallest k with (1.25/2.25)^(k+1) ≤
// 0.025, k = 6 (hand computation), and 5 alerts lie inside. All units
// together: 5 counted against 2.5 expected, the exact interval of 5
// events (Garwood 1936; standard tables: 1.623 to 11.668) over 2.5.
func TestUnitBudget(t *testing.T) {
	known := pipeline.Calibration{Budget: 0.25, Rate: 0.25, RateLow: 0.1, RateHigh: 0.6}
	none := unitBudget("a", known, 0, 5)
	if none.PredictedLow != 0 || none.PredictedHigh != 4 || !none.InPrediction || !none.WithinFactor2 || !none.Consistent || none.Expected != 1.25 {
		t.Errorf("no alert: %+v", none)
	}
	five := unitBudget("b", known, 5, 5)
	if five.InPrediction || five.WithinFactor2 || !five.Consistent || five.Measured != 1 {
		t.Errorf("5 alerts: %+v", five)
	}
	unsure := known
	unsure.RateSE = 0.25
	if b := unitBudget("c", unsure, 5, 5); b.PredictedLow != 0 || b.PredictedHigh != 6 || !b.InPrediction {
		t.Errorf("5 alerts, rate SE 0.25: %+v", b)
	}
	var w strings.Builder
	printSuiteBudgets(&w, []suiteRow{{Plant: "p", Budgets: []suiteBudget{none, five}}})
	want := "within a factor 2 of the budget 1/2 (not: p/b 1.00); count inside fit's 95 % predictive interval for the test days 1/2 (not: p/b 5 in [0, 4]); " +
		"fit's rate interval overlapping the count's own 95 % interval 2/2; all units: 5 counted, 2.5 expected, ratio 2.00 [95 % 0.65, 4.67]\n"
	if !strings.HasSuffix(w.String(), want) {
		t.Errorf("line\n%s\nwant it to end\n%s", w.String(), want)
	}
}

// TestSuiteBudgetsNothingExpected: units whose calibrations expect no
// false alert at all (rate 0) give no ratio of counted to expected, which
// would divide by zero (NaN or +Inf on the line); the counts are still
// printed.
func TestSuiteBudgetsNothingExpected(t *testing.T) {
	zero := unitBudget("a", pipeline.Calibration{Budget: 0.25}, 1, 5)
	var w strings.Builder
	printSuiteBudgets(&w, []suiteRow{{Plant: "p", Budgets: []suiteBudget{zero}}})
	if s := w.String(); strings.Contains(s, "NaN") || strings.Contains(s, "Inf") || !strings.HasSuffix(s, "all units: 1 counted, 0.0 expected\n") {
		t.Errorf("line\n%s\nwant it to end with the counts and no ratio", s)
	}
}
