package tracker

import "math"

// Widen adds the deviation of x from the EW means, on the channels set in
// which (len p), to the EW covariance with weight w > 0:
//
//	δᵢ = xᵢ − μᵢ (a channel in which, observed, finite), else 0
//	C ← C + w·δδᵀ
//
// The means stay where they are. It is the engine's step when an incident
// is accepted as the plant's new normal: called once per frame over a
// window of n frames with w = W/n, it gives the window's states the weight
// W in the normal experience of the unit, next to the old normal (whose
// weights sum to one). By the Sherman–Morrison formula a state at
// Mahalanobis distance m from the mean before the widening is at
// m/(1 + W·m) < 1/W after it, however far it was: the accepted state is
// within the limits once the modes and limits are refreshed (Refresh),
// while a return to the old operating point stays normal too, which a
// move of the means (Recentre) would turn into a new alarm. The widening
// fades with the unit's forgetting like any other frame. It does nothing
// on a frozen tracker, and allocates nothing.
func (t *Tracker) Widen(x []float64, which []bool, w float64) {
	if len(x) != t.p || len(which) != t.p {
		panic("tracker: Widen: length mismatch")
	}
	if !(w > 0) || math.IsInf(w, 0) || t.frozen || t.baseline {
		return
	}
	e := t.ew
	e.Flush()
	d := e.d
	any := false
	for i, on := range which {
		d[i] = 0
		if on && e.count[i] > 0 && !math.IsNaN(x[i]) && !math.IsInf(x[i], 0) {
			d[i] = x[i] - e.mean[i]
			any = any || d[i] != 0
		}
	}
	if !any {
		return
	}
	p := e.p
	for i := 0; i < p; i++ {
		if d[i] == 0 {
			continue
		}
		wi := w * d[i]
		row := e.cov.Data[i*p : i*p+p]
		for j := i; j < p; j++ {
			row[j] += wi * d[j]
		}
		e.vari[i] += wi * d[i]
	}
}
