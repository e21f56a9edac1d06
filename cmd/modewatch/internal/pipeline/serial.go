package pipeline

import (
	"math"

	"gonum.org/v1/gonum/mat"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker"
)

// serialRing is the number of past values a serialLearner keeps per
// channel: the longest sampled lag.
var serialRing = tracker.SerialLag(tracker.SerialLags - 1)

// serialMinPairs is the least number of frame pairs at a lag k, as a
// multiple of k, for the autocorrelation at k to be kept: a log shorter
// than a few times the lag says little about it.
const serialMinPairs = 4

// serialLearner learns one channel's sample autocorrelation at the lags
// tracker.SerialLag from a normal log in one pass (fit), for
// alerts.ChannelProfile.Autocorr:
//
//	ρ(k) = Σ_t (x_t − x̄)(x_{t−k} − x̄) / n_k  ÷  Σ_t (x_t − x̄)² / n
//
// over the pairs with both values present (values shifted by the first
// one, against cancellation).
type serialLearner struct {
	ring   []float64 // past values (NaN: missing), ring[pos] the oldest
	pos    int
	shift  float64
	seen   bool
	n      float64
	s1, s2 float64
	// per lag: pairs, Σx_t, Σx_{t−k}, Σx_t·x_{t−k}
	nk, a, b, ab [tracker.SerialLags]float64
}

func (sl *serialLearner) add(v float64, ok bool) {
	if sl.ring == nil {
		sl.ring = make([]float64, serialRing)
		for i := range sl.ring {
			sl.ring[i] = math.NaN()
		}
	}
	if !ok || v != v {
		v = math.NaN()
	} else {
		if !sl.seen {
			sl.shift, sl.seen = v, true
		}
		v -= sl.shift
		sl.n++
		sl.s1 += v
		sl.s2 += v * v
		for m := range sl.nk {
			k := tracker.SerialLag(m)
			u := sl.ring[(sl.pos+serialRing-k)%serialRing]
			if u != u {
				continue
			}
			sl.nk[m]++
			sl.a[m] += v
			sl.b[m] += u
			sl.ab[m] += v * u
		}
	}
	sl.ring[sl.pos] = v
	sl.pos = (sl.pos + 1) % serialRing
}

// autocorr returns ρ at the lags with enough pairs (the first lag
// without ends the list), nil when the channel has no variance.
func (sl *serialLearner) autocorr() []float64 {
	if sl.n < 2 {
		return nil
	}
	mean := sl.s1 / sl.n
	c0 := sl.s2/sl.n - mean*mean
	if !(c0 > 0) {
		return nil
	}
	var out []float64
	for m := range sl.nk {
		k := float64(tracker.SerialLag(m))
		nk := sl.nk[m]
		if nk < serialMinPairs*k || nk < 2 {
			break
		}
		c := (sl.ab[m] - mean*(sl.a[m]+sl.b[m]) + nk*mean*mean) / nk
		out = append(out, math.Max(-1, math.Min(1, c/c0)))
	}
	return out
}

// shrinkRule returns the unit's model.shrink as a tracker rule.
func (u *Unit) shrinkRule() tracker.ShrinkRule {
	switch u.p.cfg.ModelFor(u.Name).Shrink {
	case configs.ShrinkWhole:
		return tracker.ShrinkWhole
	case configs.ShrinkChannel:
		return tracker.ShrinkChannel
	}
	return tracker.ShrinkNone
}

// shrinkFrom sets tr's correlation shrinkage (model.shrink) from the
// channels' autocorrelations in the profiles prof (learned in fit, else
// those of its model file). A tracker of another width than the unit's
// channels (lagged copies), or a unit without the setting, has none.
func (u *Unit) shrinkFrom(tr *tracker.Tracker, prof []alerts.ChannelProfile) {
	rule := u.shrinkRule()
	if tr == nil {
		return
	}
	if rule == tracker.ShrinkNone || tr.P() != len(u.names) || len(u.names) == 0 {
		tr.SetSerialFactors(nil, tracker.ShrinkNone)
		return
	}
	ac := make(map[string][]float64, len(prof))
	for i := range prof {
		ac[prof[i].Channel] = prof[i].Autocorr
	}
	rho := make([][]float64, len(u.names))
	for j, n := range u.names {
		rho[j] = ac[n]
	}
	s := mat.NewSymDense(len(rho), nil)
	tracker.SerialFactorsTo(s, rho)
	tr.SetSerialFactors(s, rule)
}
