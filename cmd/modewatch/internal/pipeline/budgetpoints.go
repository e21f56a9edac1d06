package pipeline

import (
	"math"
	"slices"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// The budget calibration and the new-operating-point rule
// (alerts.calibrate_points).
//
// The service records a model alarm of T² and φ alone, spread over the
// unit's channels, as a new operating point (alerts/newpoint.go): a notice,
// not an alert, unless a residual statistic joins, one channel comes to
// explain alerts.PointShare of the index, T² or φ is still in alarm
// alerts.PointSettle after the record, or another point was recorded
// within accept_after. The calibration's held-out half, scored by a model
// learned on the first half of the normal log, meets levels of the
// plant's drivers that model has not seen; those show in T² alone, and
// counted as alerts they set the unit's one scale, which then also slows
// the residual statistics (README, The demo's two missed targets). With
// alerts.calibrate_points the calibration counts what the service would
// count. On a held-out frame where one channel explains PointShare of the
// index (alerts.Concentrated) T² and φ keep their ratio; on any other frame
// they keep only the larger of
//
//   - the least ratio over the PointSettle up to the frame (the rule
//     opens at scale c there only if they stayed over c for the
//     settling time), and
//   - the smaller of the frame's ratio and the largest ratio of the
//     spread frames between accept_after and PointSettle before it (an
//     earlier excursion over c took the unit's one notice of that span).
//
// The residual statistics are counted as always. Not mirrored: the
// on-delay of the concentration (here frame by frame), T²'s alarm kept
// by a residual one, and the widening that takes a point in (the held-out
// scoring runs the rule at the base limits, not at the calibrated scale).

// pointStats are the statistics the new-operating-point rule judges by
// their spread (T² and φ, alerts.StatT2 and alerts.StatPhi).
var pointStats = [...]int{slices.Index(statNames[:], alerts.StatT2), slices.Index(statNames[:], alerts.StatPhi)}

// pointRatios returns a copy of ratios with the ratios of T² and φ on the
// frames k with spread[k] replaced as above, accept being the unit's
// accept_after (NaN stays NaN). spread shorter than ratios counts as false.
func pointRatios(t []time.Time, ratios [][nStatistics]float64, spread []bool, accept time.Duration) [][nStatistics]float64 {
	out := slices.Clone(ratios)
	isSpread := func(k int) bool { return k < len(spread) && spread[k] }
	for _, j := range pointStats {
		r := func(k int) float64 { return ratios[k][j] }
		// Monotone queues of frame indices: low's ratios increase (its
		// head the least over the settling time), prev's decrease (its
		// head the largest of the earlier spread frames); next is the
		// first frame not yet in prev.
		var low, prev []int
		next := 0
		for k := range ratios {
			for len(low) > 0 && !t[low[0]].After(t[k].Add(-alerts.PointSettle)) {
				low = low[1:]
			}
			for ; next < k && !t[next].After(t[k].Add(-alerts.PointSettle)); next++ {
				if v := r(next); isSpread(next) && !math.IsNaN(v) {
					for len(prev) > 0 && r(prev[len(prev)-1]) <= v {
						prev = prev[:len(prev)-1]
					}
					prev = append(prev, next)
				}
			}
			for len(prev) > 0 && !t[prev[0]].After(t[k].Add(-accept)) {
				prev = prev[1:]
			}
			v := r(k)
			if math.IsNaN(v) {
				continue
			}
			for len(low) > 0 && r(low[len(low)-1]) >= v {
				low = low[:len(low)-1]
			}
			low = append(low, k)
			if !isSpread(k) {
				continue
			}
			w := r(low[0])
			if len(prev) > 0 {
				w = max(w, min(v, r(prev[0])))
			}
			out[k][j] = w
		}
	}
	return out
}

// CalibratesPoints reports whether fit's budget calibration of unit name
// under c leaves out the excursions the new-operating-point rule records
// as notices (alerts.calibrate_points, default
// configs.DefaultCalibratePoints), and the unit's accept_after: only where
// that rule runs (alerts.new_point, and a bounded hold).
func CalibratesPoints(c *configs.Config, name string) (time.Duration, bool) {
	on := configs.DefaultCalibratePoints
	if a := c.AlertsFor(name); a.CalibratePoints != nil {
		on = *a.CalibratePoints
	}
	ac := AlertsConfig(c)
	r, ok := ac.Units[name]
	if !ok {
		r = ac.Rules
	}
	accept := r.AcceptAfter
	if accept == 0 {
		accept = alerts.DefaultAcceptAfter
	}
	return accept, on && !r.NoNewPoint && accept > 0
}
