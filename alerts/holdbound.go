package alerts

import (
	"fmt"
	"math"
	"slices"
	"time"
)

// The bound of the hold.
//
// The bounded hold (hold.go) has two sides: an incident flat for
// Rules.AcceptAfter is taken as the new normal and closes once its
// statistics return below the limits; and no incident stays open longer
// than its disturbance plus AcceptAfter. Accepted only after AcceptAfter
// flat, an incident could only close later: the learner first takes the
// accepted state in (Rules.RelearnSpan: the pipeline's recentring window
// and the refresh that ends it, at the unit's frame period), then the
// statistics must stay under limit·(1 − Deadband) for the off-delay. So
// AcceptAfter is made the longest a flat incident stays open:
//
//   - the hold accepts a flat incident that closing time early, when its
//     flat time reaches AcceptAfter − (RelearnSpan + 2·OffDelay) (at most
//     half of AcceptAfter early, acceptLead), so that one whose statistics return as
//     the learner expects has closed as the new normal (EndNewNormal) by
//     its last growth plus AcceptAfter;
//   - an accepted incident still open at its last growth plus AcceptAfter
//     ends there: with EndNewNormal when every statistic of the unit is
//     below its limit by then (only the off-delay was still running),
//     else with EndHoldElapsed. Its record keeps Accepted and the model
//     state ModelAccepted, and its channels stay learned. An incident
//     whose statistics are all below their limits is not accepted (there
//     is no state to take in); still open at the bound it ends there as
//     EndReturned.
//
// The statistics of a unit whose incident ended by EndHoldElapsed may
// still be over their limits: its model alarm stays in alarm (the alarm
// states say what the statistics do), and the ended incident's channels
// stay covered until the alarm returns to normal: frames they lead open
// no new incident. Frames led by other channels open one on the unit's
// on-delay as on a quiet unit (a second fault is still reported), and a
// level that grows by holdGrowth over the level at the end uncovers them
// (a later change in those channels is a new incident).

// EndHoldElapsed: the incident had been accepted as the plant's new normal
// and was still open at its last growth plus accept_after, the longest a
// flat incident stays open; its channels stay learned.
const EndHoldElapsed = "hold_elapsed"

// acceptLead is how long before AcceptAfter of flat time the bounded hold
// accepts an incident: the time its statistics need to return once it is
// accepted, RelearnSpan + 2·OffDelay, at most half of AcceptAfter. The
// off-delay counts twice: once for the statistics to settle under their
// limits after the learner's refresh (they cross back over now and then
// in its first minutes, restarting the off-delay), once to clear (design
// choice, from the time accepted incidents took to close on the realism
// suite over seeds: the README, The bound of the hold).
func (r *Rules) acceptLead() time.Duration {
	return min(r.RelearnSpan+2*r.OffDelay, r.AcceptAfter/2)
}

// holdCover is what a unit keeps of its incidents ended by EndHoldElapsed
// while its model alarm stays in alarm (see above).
type holdCover struct {
	active   bool     // an incident ended at its hold and the unit is still in alarm
	channels []string // sorted; emptied by a growth
	level    float64  // smoothed largest statistic/limit ratio of the unit
	ref      float64  // level at the last end (the largest), growth reference
}

func (c *holdCover) holds(ch string) bool {
	_, ok := slices.BinarySearch(c.channels, ch)
	return ok
}

// on reports whether the unit's frames are attributed although it may
// have no open incident (see above).
func (c *holdCover) on() bool { return c.active }

// add covers the channels of an incident ended at level.
func (c *holdCover) add(chs []string, level float64) {
	c.active = true
	for _, ch := range chs {
		if i, ok := slices.BinarySearch(c.channels, ch); !ok {
			c.channels = slices.Insert(c.channels, i, ch)
		}
	}
	c.level, c.ref = max(c.level, level), max(c.ref, level)
}

func (c *holdCover) clear() { c.active, c.channels, c.level, c.ref = false, c.channels[:0], 0, 0 }

// step follows the unit's level r while channels are covered, and
// uncovers them when it grows by holdGrowth over the reference.
func (c *holdCover) step(r float64) {
	if len(c.channels) == 0 {
		return
	}
	c.level += (r - c.level) / holdSmooth
	if c.level > c.ref*(1+holdGrowth) {
		c.channels = c.channels[:0]
	}
}

// expireHold ends inc, a model incident of u still open at its last
// growth plus AcceptAfter, accepted or with the unit's statistics below
// their limits (see above for the end reason), and covers its
// channels while the unit stays in alarm. The unit's chattering episode
// stays open (it ends by its own timer).
func (e *Engine) expireHold(u *unit, inc *incident, t time.Time) {
	level := inc.loc.hold.level
	chs := inc.loc.channels
	reason := EndHoldElapsed
	switch {
	case inc.loc.hold.accepted == nil:
		reason = EndReturned // below the limits, not accepted
	case u.clearing():
		reason = EndNewNormal
	}
	if e.endLocated(u, inc, t, reason) && u.modelG.inAlarm {
		u.loc.cover.add(chs, level)
	}
}

// clearing reports whether every statistic of u is below its limit
// (normal, or clearing: waiting out the off-delay).
func (u *unit) clearing() bool {
	for k := range u.stats {
		if s := u.stats[k].State(); s == Active || s == Confirming {
			return false
		}
	}
	return true
}

// snapCover is the snapshot of a unit's holdCover.
type snapCover struct {
	Channels []string `json:"channels"`
	Level    float64  `json:"level"`
	Ref      float64  `json:"ref"`
}

func snapCoverOf(c *holdCover) *snapCover {
	if !c.on() {
		return nil
	}
	return &snapCover{Channels: append([]string{}, c.channels...), Level: c.level, Ref: c.ref}
}

// restore sets c from s (nil: nothing covered); a level or reference
// that is negative or not finite is refused, as for an incident's hold.
func (s *snapCover) restore(c *holdCover) error {
	c.clear()
	if s == nil {
		return nil
	}
	if !(s.Level >= 0) || !(s.Ref >= 0) || math.IsInf(s.Level, 0) || math.IsInf(s.Ref, 0) {
		return fmt.Errorf("hold cover: level %v, reference %v", s.Level, s.Ref)
	}
	c.add(s.Channels, 0)
	c.level, c.ref = s.Level, s.Ref
	return nil
}
