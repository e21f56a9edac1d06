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
// on a frozen tracker, and allocates nothing. It is [Tracker.DeviationTo]
// followed by the widening of [Tracker.WidenBy] on every channel.
func (t *Tracker) Widen(x []float64, which []bool, w float64) {
	if len(x) != t.p || len(which) != t.p {
		panic("tracker: Widen: length mismatch")
	}
	if !(w > 0) || math.IsInf(w, 0) || t.frozen || t.baseline {
		return
	}
	d := t.DeviationTo(t.ew.d, x, which)
	t.widen(d, w, false)
}

// DeviationTo fills dst (len p) with the deviation of x from the EW
// means on the channels set in which, in channel units, and returns it:
//
//	dstᵢ = xᵢ − μᵢ (a channel in which, learned at least once, xᵢ finite), else 0
//
// It is the deviation [Tracker.Widen] adds; [Tracker.WidenBy] adds a
// deviation taken this way under another model (another operating state
// of the same unit). It folds the frames buffered for the covariance
// first and allocates nothing. It panics on a length mismatch.
func (t *Tracker) DeviationTo(dst, x []float64, which []bool) []float64 {
	if len(dst) != t.p || len(x) != t.p || len(which) != t.p {
		panic("tracker: DeviationTo: length mismatch")
	}
	e := t.ew
	e.Flush()
	for i, on := range which {
		dst[i] = 0
		if on && e.count[i] > 0 && !math.IsNaN(x[i]) && !math.IsInf(x[i], 0) {
			dst[i] = x[i] - e.mean[i]
		}
	}
	return dst
}

// WidenBy adds a deviation d (len p, channel units), taken under another
// model of the same channels ([Tracker.DeviationTo]), to the EW covariance
// with weight w > 0, on the channels this tracker's model holds now:
//
//	C ← C + w·d̃d̃ᵀ,   d̃ᵢ = dᵢ for a channel in the model, else 0
//
// The means stay where they are. A channel out of the model (stuck, at
// rest in this operating state, warming up) takes nothing: a deviation
// seen where it moved would give a channel at rest a spread it does not
// have. Before the tracker has a model, and on a frozen tracker or one
// held as a fitted baseline, it does nothing, as Widen. By the
// Sherman–Morrison formula a state whose deviation from this model's means
// is d̃ then lies within Mahalanobis distance 1/W of them once the weights
// W of a window sum up and the model is refreshed (see Widen). It
// allocates nothing and panics on a length mismatch.
func (t *Tracker) WidenBy(d []float64, w float64) {
	if len(d) != t.p {
		panic("tracker: WidenBy: length mismatch")
	}
	if !(w > 0) || math.IsInf(w, 0) || t.frozen || t.baseline || !t.ready {
		return
	}
	t.widen(d, w, true)
}

// widen adds w·ddᵀ to the EW covariance (and its diagonal to the
// variances), on the channels with a finite, nonzero dᵢ, and, with
// inModel, only on those the model holds.
func (t *Tracker) widen(d []float64, w float64, inModel bool) {
	t.lst.reset() // the variances move: the frames before were standardized by others
	e := t.ew
	e.Flush()
	p := e.p
	for i := 0; i < p; i++ {
		if !t.widens(d, i, inModel) {
			continue
		}
		wi := w * d[i]
		row := e.cov.Data[i*p : i*p+p]
		for j := i; j < p; j++ {
			if t.widens(d, j, inModel) {
				row[j] += wi * d[j]
			}
		}
		e.vari[i] += wi * d[i]
	}
}

// widens reports whether channel i takes part in a widening by d.
func (t *Tracker) widens(d []float64, i int, inModel bool) bool {
	v := d[i]
	if v == 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return false
	}
	return !inModel || (t.ready && t.mdl.include[i])
}
