package pipeline

import (
	"fmt"
	"math"
)

// check reports the first field of a calibration read from a model file or
// checkpoint that no fit writes: a negative or non-finite rate, standard
// error, count or span, a rate interval upside down, or a week's
// prediction (Week) with a horizon that is not positive, a negative or
// upside-down count interval or a coverage outside [0, 1]. A nil
// calibration, and one written before the fields it lacks, pass. The
// scale itself is checked where it is used (setCalibration).
func (c *Calibration) check() error {
	if c == nil {
		return nil
	}
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"budget_per_day", c.Budget}, {"rate_per_day", c.Rate}, {"rate_se_per_day", c.RateSE},
		{"rate_low_per_day", c.RateLow}, {"rate_high_per_day", c.RateHigh}, {"gev_rate_per_day", c.GEVRate},
		{"observed_alerts", float64(c.Observed)}, {"held_out_days", c.HeldOutDays},
	} {
		if !(f.v >= 0) || math.IsInf(f.v, 0) {
			return fmt.Errorf("%s %v: want a finite number ≥ 0", f.name, f.v)
		}
	}
	if c.RateLow > c.RateHigh {
		return fmt.Errorf("rate_low_per_day %v above rate_high_per_day %v", c.RateLow, c.RateHigh)
	}
	if w := c.Week; w != nil {
		switch {
		case !(w.Days > 0) || math.IsInf(w.Days, 0):
			return fmt.Errorf("predicted_week: days %v, want a finite number > 0", w.Days)
		case !(w.Expected >= 0) || math.IsInf(w.Expected, 0):
			return fmt.Errorf("predicted_week: expected %v, want a finite number ≥ 0", w.Expected)
		case w.Low < 0 || w.Low > w.High:
			return fmt.Errorf("predicted_week: interval [%d, %d], want 0 ≤ low ≤ high", w.Low, w.High)
		case !(w.LowPerDay >= 0 && w.LowPerDay <= w.HighPerDay) || math.IsInf(w.HighPerDay, 0):
			return fmt.Errorf("predicted_week: per day [%v, %v], want finite, 0 ≤ low ≤ high", w.LowPerDay, w.HighPerDay)
		case !(w.Coverage >= 0 && w.Coverage <= 1):
			return fmt.Errorf("predicted_week: coverage %v, want [0, 1]", w.Coverage)
		}
	}
	return nil
}
