package alerts

import (
	"slices"
	"time"
)

// One disturbance, one incident.
//
// A disturbance that moves a whole unit a little (a load the model has not
// seen, a warm afternoon) keeps its statistics hovering around their
// limits for hours. Two rules keep it from opening a train of incidents:
//
//   - Re-opening (re-alarm within a short time). When a unit's model
//     alarm activates again, or a new location's on-delay is met, within
//     Rules.ReopenWithin of the end of one of the unit's model incidents
//     that returned to normal, and the frame points at that incident's
//     location (its first leading channel lies there) or at no place of
//     its own (see specific), that incident re-opens under its id instead
//     of a new one: its record's Reopened counts the returns and
//     LastReopened says when. Alarm management treats an alarm that
//     returns and re-annunciates within a short time as one repeating
//     alarm, not as new events (EEMUA 191 and ISA-18.2, "chattering and
//     fleeting alarms"; common practice). An incident accepted as the new
//     normal, merged into another, or ended by its chattering episode
//     never re-opens: a later change in its channels is a new incident.
//   - Specific frames. A frame points at a place of its own only when its
//     first leading channel alone explains at least Rules.SpecificShare of
//     the index (Contributor.Share: the fraction of the index removed by
//     reconstructing that channel, Alcalá & Qin 2009). A fault in one
//     piece of equipment is removed, mostly, by reconstructing its
//     channel; a unit-wide move leaves many channels equally over their
//     limits, each explaining a small part, and which of them ranks first
//     is chance. Such a frame neither counts towards a new location's
//     on-delay nor opens one: it supports the unit's first incident, like
//     a frame without a leading channel.

// DefaultReopenWithin is how long after its return to normal a model
// incident re-opens instead of a new one (design choice: an hour, twelve
// default off-delays, a short time against the budget of a few false
// alerts a week; chosen on the realism suite, see the README).
const DefaultReopenWithin = time.Hour

// DefaultSpecificShare: a frame points at a place of its own when its first
// leading channel explains at least a fifth of the index (design choice,
// chosen on the realism suite, see the README).
const DefaultSpecificShare = 0.2

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
	if len(r.incs) == recentKept {
		r.incs = slices.Delete(r.incs, 0, 1)
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

// firstLeadShare returns the Share of o's first leading contributor (over
// its own limit), and false when there is none.
func firstLeadShare(o *Observation) (float64, bool) {
	for i := range o.Contributors {
		c := &o.Contributors[i]
		if IsLeading(c.RBC, c.Limit, 0) {
			return c.Share, true
		}
	}
	return 0, false
}

// specific reports whether frame o points at a place of its own under u's
// rules: it has a leading channel that explains at least SpecificShare of
// the index.
func (u *unit) specific(o *Observation) bool {
	s, ok := firstLeadShare(o)
	return ok && s >= u.rules.SpecificShare
}

// reopenable returns the most recently ended model incident of u that the
// frame o at t re-opens (see above), or nil. lead is o's leading channels.
func (u *unit) reopenable(o *Observation, lead []string, t time.Time) *incident {
	r := &u.recent
	if u.rules.ReopenWithin <= 0 {
		return nil
	}
	r.prune(t, u.rules.ReopenWithin)
	spec := len(lead) > 0 && u.specific(o)
	for i := len(r.incs) - 1; i >= 0; i-- {
		inc := r.incs[i]
		if !spec || (inc.loc != nil && inc.loc.holds(lead[0])) {
			return inc
		}
	}
	return nil
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
		inc.loc.lastSupport = t
		inc.loc.hold.start(t)
	}
	inc.dirty = true
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
