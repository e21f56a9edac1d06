package cli

import (
	"fmt"
	"io"
	"strings"

	"gonum.org/v1/gonum/stat/distuv"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
)

// suiteBudget compares, for one unit, the false alerts the suite measured
// on the test days with what fit's budget calibration expected
// (pipeline.Calibration): the targets are a measured rate within a
// factor of two of the budget (or below it), and a count inside fit's
// predictive interval for that many days.
type suiteBudget struct {
	Unit string `json:"unit"`
	// Budget, Rate, RateLow and RateHigh are fit's, false alerts per day:
	// RateLow and RateHigh bound the true rate, not a measured one.
	Budget   float64 `json:"budget_per_day"`
	Rate     float64 `json:"rate_per_day"`
	RateLow  float64 `json:"rate_low_per_day"`
	RateHigh float64 `json:"rate_high_per_day"`
	// False counts the unit's strict false alerts (every kind) over
	// TestDays; Measured is False / TestDays.
	False    int     `json:"false_alerts"`
	Measured float64 `json:"measured_per_day"`
	// Expected is fit's expected count over TestDays (Rate · TestDays);
	// PredictedLow and PredictedHigh its 95 % predictive interval of the
	// count over TestDays (pipeline.Calibration.Predict: the rate's
	// uncertainty and the chance of counting together).
	Expected      float64 `json:"expected_false_alerts"`
	PredictedLow  int     `json:"predicted_low"`
	PredictedHigh int     `json:"predicted_high"`
	// CountLow and CountHigh are the exact 95 % Poisson interval of the
	// measured rate (Garwood 1936: χ²(2k, 0.025)/2 and χ²(2k+2, 0.975)/2
	// per TestDays), which says how far a few days of counts can pin it.
	CountLow  float64 `json:"measured_low_per_day"`
	CountHigh float64 `json:"measured_high_per_day"`
	// WithinFactor2: Measured ≤ 2 · Budget. InPrediction: PredictedLow ≤
	// False ≤ PredictedHigh. Consistent: the rate's interval and the
	// count's own interval overlap.
	WithinFactor2 bool `json:"within_factor_2"`
	InPrediction  bool `json:"in_prediction"`
	Consistent    bool `json:"consistent"`
}

// suiteBudgets reads fit's calibrations from the model file and sets them
// beside the replay's per-unit false alerts over testDays. Units without
// a calibration (no budget) are left out.
func suiteBudgets(modelPath string, units []evaluate.UnitMetrics, testDays float64) ([]suiteBudget, error) {
	mf, err := pipeline.ReadModel(modelPath)
	if err != nil {
		return nil, err
	}
	falseOf := map[string]int{}
	for _, u := range units {
		falseOf[u.Unit] = u.FalseAlerts
	}
	var out []suiteBudget
	for _, u := range mf.Units {
		c := u.Calibration
		if c == nil || testDays <= 0 {
			continue
		}
		out = append(out, unitBudget(u.Name, *c, falseOf[u.Name], testDays))
	}
	return out, nil
}

// unitBudget compares k false alerts of unit name over testDays (> 0)
// with its calibration c.
func unitBudget(name string, c pipeline.Calibration, k int, testDays float64) suiteBudget {
	p := c.Predict(testDays)
	b := suiteBudget{Unit: name, Budget: c.Budget, Rate: c.Rate, RateLow: c.RateLow, RateHigh: c.RateHigh,
		False: k, Measured: float64(k) / testDays, Expected: p.Expected, PredictedLow: p.Low, PredictedHigh: p.High}
	b.CountLow, b.CountHigh = poissonInterval(k, testDays)
	b.WithinFactor2 = b.Measured <= targetBudgetFactor*b.Budget
	b.InPrediction = p.Low <= k && k <= p.High
	b.Consistent = b.CountLow <= b.RateHigh && b.RateLow <= b.CountHigh
	return b
}

// poissonInterval is the exact (Garwood) 95 % interval of a Poisson rate
// from k events over t days.
func poissonInterval(k int, t float64) (lo, hi float64) {
	if k > 0 {
		lo = distuv.ChiSquared{K: float64(2 * k)}.Quantile(0.025) / 2 / t
	}
	hi = distuv.ChiSquared{K: float64(2*k + 2)}.Quantile(0.975) / 2 / t
	return lo, hi
}

// printSuiteBudgets prints one line: over all plants, how many units are
// within a factor two of the budget, inside fit's predictive interval of
// the count over their test days, and with the rate's interval
// overlapping the count's, naming the units that are not; then all units
// together, the false alerts counted against fit's expected count, with
// the exact Poisson interval of their ratio (the count's interval over
// the expected count: a check of the calibration's overall level).
func printSuiteBudgets(w io.Writer, rows []suiteRow) {
	var n, f2, in, cons, total int
	var expected float64
	var notF2, notIn, notCons []string
	for _, r := range rows {
		for _, b := range r.Budgets {
			n++
			total += b.False
			expected += b.Expected
			name := r.Plant + "/" + b.Unit
			if b.WithinFactor2 {
				f2++
			} else {
				notF2 = append(notF2, fmt.Sprintf("%s %.2f", name, b.Measured))
			}
			if b.InPrediction {
				in++
			} else {
				notIn = append(notIn, fmt.Sprintf("%s %d in [%d, %d]", name, b.False, b.PredictedLow, b.PredictedHigh))
			}
			if b.Consistent {
				cons++
			} else {
				notCons = append(notCons, name)
			}
		}
	}
	if n == 0 {
		return
	}
	list := func(s []string) string {
		if len(s) == 0 {
			return ""
		}
		return " (not: " + strings.Join(s, "; ") + ")"
	}
	// The ratio needs an expected count: none when every rate is 0.
	ratio := ""
	if expected > 0 {
		lo, hi := poissonInterval(total, expected)
		ratio = fmt.Sprintf(", ratio %.2f [95 %% %.2f, %.2f]", float64(total)/expected, lo, hi)
	}
	fmt.Fprintf(w, "budget, per unit, false alerts on the test days against fit's calibration: within a factor 2 of the budget %d/%d%s; count inside fit's 95 %% predictive interval for the test days %d/%d%s; fit's rate interval overlapping the count's own 95 %% interval %d/%d%s; all units: %d counted, %.1f expected%s\n",
		f2, n, list(notF2), in, n, list(notIn), cons, n, list(notCons), total, expected, ratio)
}
