package alerts

import (
	"slices"
	"time"
)

// One disturbance, one incident.
//
// A disturbance that moves a whole unit a little (a load the model has not
// seen, a warm afternoon) keeps its statistics hovering around their
// limits for hours, and leaves many channels of a kind equally over their
// own limits, so that which of them ranks first is chance. Two rules keep
// it from opening a train of incidents:
//
//   - Specific frames. A frame points at a place of its own only when its
//     first leading channel alone explains at least Rules.SpecificShare of
//     the index (Contributor.Share: the fraction of the index removed by
//     reconstructing that channel, Alcalá & Qin 2009). A fault in one
//     piece of equipment is mostly removed by reconstructing its channel;
//     a unit-wide move is not, each of its channels explaining a small
//     part. While the unit is in alarm, a frame that is not specific
//     neither counts towards a new location's on-delay nor speaks for an
//     open incident (its contributors are not the incident's).
//   - Re-opening. When a unit's model alarm activates again on a frame
//     that is not specific, within Rules.ReopenWithin of the end of one of
//     the unit's model incidents that returned to normal, the latest such
//     incident re-opens under its id instead of a new alert: its record's
//     Reopened counts the returns and LastReopened says when. Alarm
//     management treats an alarm that returns and re-annunciates within a
//     short time as one repeating alarm, not as new events (EEMUA 191 and
//     ISA-18.2 on chattering and fleeting alarms; common practice). A
//     specific frame, which names a place, always opens a new incident
//     (re-opening at the same place was measured on the realism suite and
//     cost detections: a re-opened incident keeps its channels out of
//     learning longer); so does a re-alarm after an incident accepted as
//     the new normal, merged into another, or ended by its chattering
//     episode.

// DefaultReopenWithin is how long after its return to normal a model
// incident re-opens on a re-alarm that names no place (design choice,
// chosen on the realism suite and the demo together, see the README:
// a unit-wide move re-alarmed after gaps of up to 2 h 40 min there).
const DefaultReopenWithin = 2 * time.Hour

// DefaultSpecificShare: a frame points at a place of its own when its first
// leading channel explains at least a quarter of the index (design
// choice, chosen on the realism suite and the demo together, see the
// README).
const DefaultSpecificShare = 0.25

// recentKept bounds the closed incidents of a unit that may re-open.
const recentKept = 8

// recentClosed is a unit's model incidents that returned to normal within
// the last ReopenWithin, oldest end first.
type recentClosed struct {
	incs []*incident
}

// note records inc, a model incident of u that just ended for reason.
func (r *recentClosed) note(u *unit, inc *incident, reason string) {
	if u.rules.ReopenWithin <= 0 || reason != EndReturned || inc.g == nil || inc.g.qkind != "" || inc.kind != KindIncident {
		return
	}
	if n := len(r.incs) - recentKept + 1; n > 0 {
		r.incs = slices.Delete(r.incs, 0, n)
	}
	r.incs = append(r.incs, inc)
}

// prune drops the incidents that ended more than w before t.
func (r *recentClosed) prune(t time.Time, w time.Duration) {
	i := 0
	for i < len(r.incs) && t.Sub(r.incs[i].end) > w {
		i++
	}
	if i > 0 {
		r.incs = slices.Delete(r.incs, 0, i)
	}
}

// specific reports whether a frame with leading channels lead, the first
// of which explains share of the index (both from leading), points at a
// place of its own under u's rules: it has a leading channel that explains
// at least SpecificShare of the index.
func (u *unit) specific(lead []string, share float64) bool {
	return len(lead) > 0 && share >= u.rules.SpecificShare
}

// reopenable returns the most recently ended model incident of u that the
// frame o at t re-opens (see above), or nil.
func (u *unit) reopenable(o *Observation, t time.Time) *incident {
	r := &u.recent
	if u.rules.ReopenWithin <= 0 {
		return nil
	}
	r.prune(t, u.rules.ReopenWithin)
	if len(r.incs) == 0 {
		return nil
	}
	var buf [LeadCount]string
	if u.specific(leading(buf[:0], o)) {
		return nil
	}
	return r.incs[len(r.incs)-1]
}

// reopen re-opens inc, a model incident of u that ended less than
// ReopenWithin ago, at frame o at t. The caller makes it the unit's first
// incident or one of its others, then publishes.
func (e *Engine) reopen(u *unit, inc *incident, o *Observation, t time.Time) {
	if i := slices.Index(u.recent.incs, inc); i >= 0 {
		u.recent.incs = slices.Delete(u.recent.incs, i, i+1)
	}
	inc.ended, inc.end, inc.endReason = false, time.Time{}, ""
	inc.reopened++
	inc.lastReopen = t.UTC()
	if inc.loc != nil {
		// The bounded hold goes on from the last growth (hold.go).
		inc.loc.lastSupport = t
	}
	inc.dirty = true
	// Out of the ring of closed incidents: it is open again, and its next
	// end retires it anew (an older entry would drop it from byID early).
	if i := slices.Index(e.closed, inc.id); i >= 0 {
		e.closed[i] = ""
	}
	e.remember(inc)
	e.emit(Event{Time: t, Unit: u.name, Kind: EventReopen, Alarm: inc.g.key, AlertID: inc.id})
	e.updateModel(inc, o, t)
}

// recordReopen fills the re-opening fields of inc's record.
func recordReopen(r *Record, inc *incident) {
	if inc.reopened > 0 {
		r.Reopened = inc.reopened
		at := inc.lastReopen
		r.LastReopened = &at
	}
}
