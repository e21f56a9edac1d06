package pipeline

import (
	"math"

	"modewatch/alerts"
	"modewatch/tracker"
)

// A second fault while incidents are open: the engine's side.
//
// While a unit has open incidents, their channels dominate the frame's
// contributions, and a second fault in other equipment seldom leads the
// frame although it is there. The frame is therefore scored once more
// with the channels of the open incidents (the learning mask) treated as
// missing, i.e. replaced by their reconstruction from the others: the
// fault reconstruction of Dunia & Qin (1998), which removes a known
// fault's directions so that what stays out of control is another fault
// (the reconstructed index; Alcalá & Qin 2009 for the contributions). When
// an alarm statistic of that score still exceeds its limit, its leading
// contributors (alerts.IsLeading) go to the alarm engine as
// Observation.Beyond, which opens a new incident for them as on a quiet
// unit (alerts: incidents per location).

// appendBeyond appends to dst the leading contributors of the frame
// scored with the unit's masked channels reconstructed, when some alarm
// statistic of that score is over its (calibrated) limit; dst unchanged
// otherwise, without alerts.beyond_incidents, and for units whose frames carry lagged copies or smoothed
// statistics (model.lags, model.smoothing). It allocates only when the
// unit grew.
func (u *Unit) appendBeyond(dst []string) []string {
	if !u.beyondOn() || !u.masked || u.lag != nil || u.smooth > 0 || len(u.mask) != len(u.x) {
		return dst
	}
	if len(u.bmiss) != len(u.x) {
		u.bmiss = make([]bool, len(u.x))
		u.presizeBeyond()
	}
	for i := range u.bmiss {
		u.bmiss[i] = u.mask[i] || (i < len(u.miss) && u.miss[i])
	}
	b := &u.beyond
	if err := u.tr.Evaluate(b, u.x, u.bmiss); err != nil || !b.Ready {
		return dst
	}
	if !u.beyondOver(b) {
		return dst
	}
	first := 0.0
	for _, c := range b.Contrib {
		if len(dst) == alerts.LeadCount {
			break
		}
		if c.Channel >= len(u.names) || u.mask[c.Channel] || u.isContext(c.Channel) {
			continue
		}
		if !alerts.IsLeading(c.RBC, c.RBCLimit, first) {
			continue
		}
		if first == 0 {
			first = c.RBC
		}
		dst = append(dst, u.names[c.Channel])
	}
	return dst
}

// beyondOver reports whether an alarm statistic of score s exceeds its
// limit times its budget scale.
func (u *Unit) beyondOver(s *tracker.Score) bool {
	on, val, lim := u.statSlots(s)
	for k := range on {
		l := lim[k] * u.statScale(k)
		if on[k] && l > 0 && !math.IsInf(l, 0) && val[k] > l {
			return true
		}
	}
	return false
}

// beyondOn reports whether alerts.beyond_incidents holds for the unit
// (default false; read once).
func (u *Unit) beyondOn() bool {
	if u.beyondSet == 0 {
		u.beyondSet = -1
		if b := u.p.cfg.AlertsFor(u.Name).BeyondIncidents; b != nil && *b {
			u.beyondSet = 1
		}
	}
	return u.beyondSet > 0
}

// presizeBeyond gives the second score's contributor slots their full
// size (every ranked slot, each with room for the modes of every column),
// so that scoring it allocates nothing per frame even though the channels
// in each rank change from frame to frame.
func (u *Unit) presizeBeyond() {
	n, p := u.tr.Config().TopContrib, u.tr.P()
	c := make([]tracker.Contribution, n)
	for i := range c {
		c[i].Modes = make([]int, 0, p)
	}
	u.beyond.Contrib = c[:0]
}
