package pipeline

import (
	"fmt"
	"math"
	"slices"
)

// SmoothedStat is one alarm statistic's smoothed ratio to its limit
// (model.smoothing) carried by a unit checkpoint, so that a restart goes
// on with the EWMA where it stood instead of starting it again from the
// next frame's ratio.
type SmoothedStat struct {
	Stat  string  `json:"stat"`  // alerts.StatT2, alerts.StatSPE, …
	Ratio float64 `json:"ratio"` // r̃, dimensionless (1 is the unscaled limit)
}

// smoothedState returns the unit's started smoothed statistics (nil with
// model.smoothing off or before the first scored frame).
func (u *Unit) smoothedState() []SmoothedStat {
	var out []SmoothedStat
	for k, ok := range u.smOK {
		if ok {
			out = append(out, SmoothedStat{Stat: statNames[k], Ratio: u.sm[k]})
		}
	}
	return out
}

// setSmoothed restores the smoothed statistics of a unit checkpoint
// (checked by checkSmoothed); a statistic not carried starts again.
func (u *Unit) setSmoothed(s []SmoothedStat) {
	u.sm, u.smOK = [nStatistics]float64{}, [nStatistics]bool{}
	for _, x := range s {
		if k := slices.Index(statNames[:], x.Stat); k >= 0 {
			u.sm[k], u.smOK[k] = x.Ratio, true
		}
	}
}

// checkSmoothed checks the smoothed statistics a model unit carries: known
// names, each once, finite non-negative ratios.
func checkSmoothed(mu *ModelUnit) error {
	if len(mu.Smoothed) > nStatistics {
		return fmt.Errorf("%w: unit %.64q carries %d smoothed statistics (at most %d)", ErrModelFile, mu.Name, len(mu.Smoothed), nStatistics)
	}
	var seen [nStatistics]bool
	for i, x := range mu.Smoothed {
		k := slices.Index(statNames[:], x.Stat)
		switch {
		case k < 0:
			return fmt.Errorf("%w: unit %.64q: smoothed statistic %d: unknown statistic %.32q", ErrModelFile, mu.Name, i, x.Stat)
		case seen[k]:
			return fmt.Errorf("%w: unit %.64q: smoothed statistic %q listed twice", ErrModelFile, mu.Name, x.Stat)
		case !(x.Ratio >= 0) || math.IsInf(x.Ratio, 0):
			return fmt.Errorf("%w: unit %.64q: smoothed statistic %q: ratio %v is not a finite non-negative number", ErrModelFile, mu.Name, x.Stat, x.Ratio)
		}
		seen[k] = true
	}
	return nil
}
