package pipeline

// How an accepted incident becomes the unit's new normal (alerts.accept_weight).
//
// With a positive weight W (the default), the recentring window after an
// acceptance (recentreFrames frames) adds each frame's deviation on the
// accepted channels to the unit's covariance with weight W/recentreFrames
// (tracker.Widen) and refreshes the modes and limits at its end: the
// accepted state joins the normal experience with the weight W and its
// statistics fall within the limits (a state at Mahalanobis distance m
// lands at m/(1 + W·m) < 1/W), so the incident closes within minutes,
// while the old operating point stays normal: a fault that ends after it
// was accepted, or a setpoint moved back, raises no new alert. The old
// behaviour moved the means of the accepted channels to their level over
// the window (tracker.Recentre); on channels with a daily cycle that level
// depends on the hour of the acceptance, and the statistics of the unit
// stayed over the limits for hours afterwards (measured on the realism
// suite, see README, Validation). A negative weight keeps it.

// DefaultAcceptWeight is the weight W of an accepted state in the unit's
// normal experience (design choice, checked on the realism suite: with
// W = 0.2 an accepted state lands at a Mahalanobis distance below 5,
// well inside the limits of a unit of a dozen channels or more, while a
// far larger step along the same direction is still seen).
const DefaultAcceptWeight = 0.2

// acceptWeight is the unit's accept weight: alerts.accept_weight, or the
// default; ≤ 0 means recentring the means. It is read once (the recentring
// window asks for it every frame, and resolving the unit's settings
// allocates); the result is never 0, so 0 means not read yet.
func (u *Unit) acceptWeight() float64 {
	if u.acceptW != 0 {
		return u.acceptW
	}
	u.acceptW = DefaultAcceptWeight
	if u.p.cfg != nil {
		if w := u.p.cfg.AlertsFor(u.Name).AcceptWeight; w != 0 {
			u.acceptW = w
		}
	}
	return u.acceptW
}
