package pipeline

// An accepted new normal and the unit's operating states.
//
// A unit with operating states holds one model per state (states.go), and
// the frames of a state train only that state's model. What the alarm
// engine accepts as the unit's new normal (an incident held past
// alerts.accept_after, or a new operating point) is a fact about the plant,
// not about the state it was seen in: a setpoint raised, a warmer season,
// a sensor re-ranged move the readings of the channels they touch by the
// same amount whether a swing machine runs or not. Widening only the
// state the acceptance happened in (accept.go) leaves every other state's
// model on the old normal, and each switch into one of them opens the same
// departure again as a new incident, held until its own bounded hold
// elapses or the machine switches back. So each frame of the recentring
// window widens the other states' models too, by the same deviation from
// the accepting state's means (tracker.DeviationTo), on the channels each
// of them holds in its model (tracker.WidenBy: a channel at rest in a
// state takes nothing), and their modes and limits are refreshed at the
// window's end with the current state's. With W the accept weight, a
// state reached by the accepted departure lies within Mahalanobis
// distance 1/W of every state's means after it (Sherman–Morrison, see
// tracker.Widen), while each state's own operating point stays normal.
// The old recentring of the means (a negative accept weight) stays with
// the accepting state alone: a level is a state's own.

// acrossStates turns widenStates and refreshStates on; tests turn it off
// to show what it changes (the package's tests do not run in parallel).
var acrossStates = true

// widenStates widens every operating state's model other than the current
// one by the current frame's deviation from the current model's means on
// the channels being taken in (u.recent), with weight w (accept.go). It
// allocates only the first time (the deviation's scratch).
func (u *Unit) widenStates(w float64) {
	s := u.states
	if !acrossStates || s == nil || len(s.models) < 2 || len(u.recent) != len(u.x) || u.tr.P() != len(u.x) {
		return
	}
	if len(s.dev) != len(u.x) {
		s.dev = make([]float64, len(u.x))
	}
	d := u.tr.DeviationTo(s.dev, u.x, u.recent)
	for _, m := range s.models {
		if m.tr == u.tr || m.tr.P() != len(d) {
			continue // the current state (widened by the caller), or one without the unit's channels yet
		}
		if m.tr.Frozen() {
			// An inactive state's freeze is stale (a fitted baseline not
			// yet run, or an alarm open when the plant left it): the
			// current state's tracker is frozen or thawed at each frame
			// (stepModel), and so is this one when the plant returns to
			// it. A model held fixed (adapt=false) never gets here
			// (learnMask).
			m.tr.Thaw()
		}
		m.tr.WidenBy(d, w)
	}
}

// refreshStates refreshes the modes and limits of every operating state's
// model other than the current one at the end of a recentring window, so
// that the widening of widenStates holds from their next frame on. A
// failed refresh keeps that state's previous model until its regular one.
func (u *Unit) refreshStates() {
	s := u.states
	if !acrossStates || s == nil {
		return
	}
	for _, m := range s.models {
		if m.tr != u.tr {
			_ = m.tr.Refresh()
		}
	}
}
