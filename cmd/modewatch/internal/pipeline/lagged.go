package pipeline

import (
	"fmt"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker"
)

// Dynamic modes (model.lags L): the unit's tracker models each frame with
// the L frames before it (tracker.Lagged), p·(L+1) columns for p
// channels, column j being channel j mod p at lag ⌊j/p⌋. u.x and u.miss
// hold the lagged frame; the channel-indexed parts of the unit (names,
// registry indices, quality screen, context flags, learning masks) keep p
// entries, and every column the tracker reports is mapped back to its
// channel (u.base) before it names anything.

// trackerWidth returns the columns of the tracker of a unit of p channels
// under model settings m: p·(1 + model.lags).
func trackerWidth(m configs.Model, p int) int {
	return p * (1 + max(m.Over(configs.DefaultModel()).Lags, 0))
}

// lags returns the unit's model.lags (0: static model).
func (u *Unit) lags() int { return max(u.model.Over(configs.DefaultModel()).Lags, 0) }

// Lags returns the lagged copies the unit's model sees (model.lags).
func (u *Unit) Lags() int { return u.lags() }

// newLagged sets up the unit's lag ring for its p channels (none for a
// static model) and sizes u.x and u.miss to the tracker's columns.
func (u *Unit) newLagged(p int) error {
	u.lag = nil
	if l := u.lags(); l > 0 {
		lg, err := tracker.NewLagged(p, l)
		if err != nil {
			return fmt.Errorf("pipeline: unit %s: %w", u.Name, err)
		}
		u.lag = lg
	}
	w := p
	if u.lag != nil {
		w = u.lag.Width()
	}
	u.x = make([]float64, w)
	u.miss = make([]bool, w)
	return nil
}

// augment turns the frame just read into u.x[:p] and u.miss[:p] into the
// lagged frame (in place; nothing for a static model) and moves it into
// the ring. It allocates nothing.
func (u *Unit) augment() {
	if u.lag == nil {
		return
	}
	p := len(u.names)
	u.lag.Augment(u.x, u.miss, u.x[:p], u.miss[:p])
}

// base returns the channel of tracker column j.
func (u *Unit) base(j int) int {
	if u.lag == nil {
		return j
	}
	c, _ := u.lag.Pair(j)
	return c
}

// column names tracker column j of tr: the channel at lag 0, "name[t-k]"
// at lag k.
func (u *Unit) column(j int) string {
	if u.lag == nil {
		return u.names[j]
	}
	return u.lag.PairName(u.names, j)
}

// lagMask widens a learning mask over the unit's channels (nil: none) to
// the tracker's columns: a channel learned as its reconstruction is so at
// every lag. It allocates only when the unit is first masked.
func (u *Unit) lagMask(m []bool) []bool {
	if u.lag == nil || m == nil {
		return m
	}
	if len(u.lmask) != len(u.x) {
		u.lmask = make([]bool, len(u.x))
	}
	p := len(m)
	for j := range u.lmask {
		u.lmask[j] = m[j%p]
	}
	return u.lmask
}

// listed reports whether channel i of the unit is among the contributors
// cs already (a lagged column of it ranked higher).
func (u *Unit) listed(cs []alerts.Contributor, i int) bool {
	for _, c := range cs {
		if c.Channel == u.names[i] {
			return true
		}
	}
	return false
}

// laggedState returns the lag ring for a unit checkpoint (nil for a
// static model).
func (u *Unit) laggedState() []byte {
	if u.lag == nil {
		return nil
	}
	b, _ := u.lag.MarshalBinary()
	return b
}
