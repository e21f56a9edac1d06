package pipeline

import (
	"math"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/tracker/limits"
)

// TestBudgetPerStatistic: the AR(1) plant of TestBudgetAR1, and in its
// held-out days a daily move to an operating point the model never saw,
// which only T² sees (its ratio ×8 for two hours a day, SPE and φ
// untouched). The single scale is then set by those excursions (above
// their rule peaks), while
// alerts.budget_per_statistic leaves SPE's scale near the scale the clean
// held-out days give, keeps the whole rule at the per-statistic scales
// within the budget's share of held-out alerts, and, on the clean days,
// meets the budget: the rate measured over 100 further days lies within
// the calibration's 95 % interval (invented series, seeded; derived check).
func TestBudgetPerStatistic(t *testing.T) {
	tr, a, rule, t0 := fittedAR1(t)
	const period, day = time.Minute, 24 * 60
	const budget = 1.0
	ct, cr := ratiosOf(t, tr, a, t0, period, 10*day)
	clean, err := CalibrateBudget(ct, cr, budget, rule, 5)
	if err != nil {
		t.Fatal(err)
	}
	calibrateEach(&clean, ct, cr, rule)
	if len(clean.Scales) != 3 {
		t.Fatalf("per-statistic scales %v, want t2, spe and phi", clean.Scales)
	}
	lt, lr := ratiosOf(t, tr, a, t0.Add(10*day*period), period, 100*day)
	var sc [nStatistics]float64
	for j, n := range statNames {
		sc[j] = clean.Scales[n]
	}
	got := float64(countAlertsEach(lt, lr, sc, rule)) / 100
	t.Logf("clean held-out: single ×%.3f, per statistic %v, expected %.3f/day [%.3f, %.3f]; measured %.2f/day over 100 days",
		clean.Scale, clean.Scales, clean.Rate, clean.RateLow, clean.RateHigh, got)
	if got < clean.RateLow || got > clean.RateHigh {
		t.Errorf("measured %.2f false alerts/day at the per-statistic scales, outside the calibration's interval [%.3f, %.3f]", got, clean.RateLow, clean.RateHigh)
	}

	// The same held-out days with a T²-only excursion on day 3.
	moved := make([][nStatistics]float64, len(cr))
	copy(moved, cr)
	for d := range 10 {
		for k := d*day + 600; k < d*day+720; k++ {
			moved[k][0] *= 8
		}
	}
	cal, err := CalibrateBudget(ct, moved, budget, rule, 5)
	if err != nil {
		t.Fatal(err)
	}
	single := cal.Scale
	calibrateEach(&cal, ct, moved, rule)
	t.Logf("with the move: single ×%.3f, per statistic %v, held-out alerts %d", single, cal.Scales, cal.Observed)
	level := math.Inf(1)
	s := ruleStat(moved, 0, rule)
	for d := range 10 {
		peak := 0.0
		for _, v := range s[d*day+600 : d*day+720] {
			peak = math.Max(peak, v)
		}
		for _, v := range []float64{peak} {
			level = math.Min(level, v) // the smallest of the moves' peaks
		}
	}
	if single < 0.9*level {
		t.Errorf("single scale ×%.3f below the moves' smallest rule peak %.3f: the series does not exercise the case", single, level)
	}
	if spe := cal.Scales[alerts.StatSPE]; !(spe < 0.5*single) || spe > 1.25*clean.Scales[alerts.StatSPE] {
		t.Errorf("SPE scale ×%.3f: want well below the single ×%.3f and near the clean ×%.3f", spe, single, clean.Scales[alerts.StatSPE])
	}
	if allow := int(math.Floor(budget * cal.HeldOutDays)); cal.Observed > allow {
		t.Errorf("the per-statistic rule opens %d alerts over the held-out days, %d allowed", cal.Observed, allow)
	}
}

// TestGumbelLevel: gumbelLevel inverts gumbelY, and on the standard
// Gumbel scale −log(−log G(z)) reproduces G (derived check).
func TestGumbelLevel(t *testing.T) {
	for _, xi := range []float64{-0.3, 0, 0.2} {
		g := gevOf(1.5, 0.4, xi)
		for _, y := range []float64{-1, 0, 2, 6} {
			z := gumbelLevel(g, y)
			if back := gumbelY(g, z); math.Abs(back-y) > 1e-9 {
				t.Errorf("ξ=%v y=%v: gumbelY(gumbelLevel) = %v", xi, y, back)
			}
			if want := math.Exp(-math.Exp(-y)); math.Abs(g.CDF(z)-want) > 1e-12 {
				t.Errorf("ξ=%v y=%v: G(z) = %v, want %v", xi, y, g.CDF(z), want)
			}
		}
	}
}

func gevOf(mu, sigma, xi float64) limits.GEV { return limits.GEV{Mu: mu, Sigma: sigma, Xi: xi} }
