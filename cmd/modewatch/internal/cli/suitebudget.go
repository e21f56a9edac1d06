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
// factor of two of the budget (or below it), and inside fit's interval.
type suiteBudget struct {
	Unit string `json:"unit"`
	// Budget, Rate, RateLow and RateHigh are fit's, false alerts per day.
	Budget   float64 `json:"budget_per_day"`
	Rate     float64 `json:"rate_per_day"`
	RateLow  float64 `json:"rate_low_per_day"`
	RateHigh float64 `json:"rate_high_per_day"`
	// False counts the unit's strict false alerts (every kind) over
	// TestDays; Measured is False / TestDays.
	False    int     `json:"false_alerts"`
	Measured float64 `json:"measured_per_day"`
	// CountLow and CountHigh are the exact 95 % Poisson interval of the
	// measured rate (Garwood 1936: χ²(2k, 0.025)/2 and χ²(2k+2, 0.975)/2
	// per TestDays), which says how far a few days of counts can pin it.
	CountLow  float64 `json:"measured_low_per_day"`
	CountHigh float64 `json:"measured_high_per_day"`
	// WithinFactor2: Measured ≤ 2 · Budget. InInterval: RateLow ≤
	// Measured ≤ RateHigh. Consistent: the two intervals overlap.
	WithinFactor2 bool `json:"within_factor_2"`
	InInterval    bool `json:"in_interval"`
	Consistent    bool `json:"consistent"`
}

// suiteBudgets reads fit's calibrations from the model file and sets them
// beside the replay's per-unit false alerts. Units without a calibration
// (no budget) are left out.
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
		k := falseOf[u.Name]
		b := suiteBudget{Unit: u.Name, Budget: c.Budget, Rate: c.Rate, RateLow: c.RateLow, RateHigh: c.RateHigh,
			False: k, Measured: float64(k) / testDays}
		b.CountLow, b.CountHigh = poissonInterval(k, testDays)
		b.WithinFactor2 = b.Measured <= 2*b.Budget
		b.InInterval = b.RateLow <= b.Measured && b.Measured <= b.RateHigh
		b.Consistent = b.CountLow <= b.RateHigh && b.RateLow <= b.CountHigh
		out = append(out, b)
	}
	return out, nil
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
// within a factor two of the budget, inside fit's interval, and consistent
// with it, naming the units that are not.
func printSuiteBudgets(w io.Writer, rows []suiteRow) {
	var n, f2, in, cons int
	var notF2, notIn, notCons []string
	for _, r := range rows {
		for _, b := range r.Budgets {
			n++
			name := r.Plant + "/" + b.Unit
			if b.WithinFactor2 {
				f2++
			} else {
				notF2 = append(notF2, fmt.Sprintf("%s %.2f", name, b.Measured))
			}
			if b.InInterval {
				in++
			} else {
				notIn = append(notIn, fmt.Sprintf("%s %.2f in [%.2f, %.2f]", name, b.Measured, b.RateLow, b.RateHigh))
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
	fmt.Fprintf(w, "budget, per unit, false alerts a day on the test days against fit's calibration: within a factor 2 of the budget %d/%d%s; inside fit's 95 %% interval %d/%d%s; overlapping it with the count's own 95 %% interval %d/%d%s\n",
		f2, n, list(notF2), in, n, list(notIn), cons, n, list(notCons))
}
