package alerts

import (
	"slices"
	"strconv"
	"time"
)

// Learning during an incident.
//
// With a Learning that also implements Masking, an open model incident no
// longer freezes the whole unit: the engine hands the unit's model the
// channels of every open incident that has not been accepted (Mask), and
// the model goes on learning with those channels replaced by their
// reconstruction from the others, so the rest of the unit follows the
// plant while the fault is not learned. Rules.FreezeWhole keeps the old
// behaviour (learning frozen while the model alarm is in alarm).
//
// Bounded hold. An incident whose level (the largest statistic/limit
// ratio of each frame, smoothed over about holdSmooth frames) has not
// grown by more than holdGrowth (relative to the level a growth settled
// at, holdSettle) for Rules.AcceptAfter of frame time (and, under
// Rules.SpreadRestartsHold, whose location has not grown either) is taken
// as the plant's new normal: its
// channels leave the mask and are learned again, its record says so
// (Accepted, ModelState ModelAccepted), and it ends with EndNewNormal once
// its statistics return below the limits. AcceptAfter is also the longest
// a flat incident stays open: the hold accepts it early by the time its
// statistics need to return, and ends it at its last growth plus
// AcceptAfter if they have not (EndHoldElapsed, holdbound.go). An operator can accept an
// incident, or every model incident of a unit, at once (OpAccept); the
// record carries who and when, like an acknowledgement.
//
// A re-opened incident (reopen.go) keeps its hold: it is the same
// disturbance repeating, its record keeps its start and counts the gap as
// open, so its flat time runs from its last growth, not from the
// re-opening. Restarted at each re-opening, the hold of a disturbance that
// dips under its limits now and then could run far past its start plus
// AcceptAfter. A level that comes back higher is a growth as on any frame.

// Model states of an incident under learning by reconstruction (besides
// the unit states ModelAdapting, ModelFrozen, ...).
const (
	// ModelReconstructing: the unit learns on, with this incident's
	// channels replaced by their reconstruction from the others.
	ModelReconstructing = "reconstructing"
	// ModelAccepted: the incident was accepted as the new normal and its
	// channels are learned again.
	ModelAccepted = "accepted"
)

// Masking receives the channels a unit's model must not learn from as
// they are (the locations of its open, not accepted incidents), sorted;
// nil or empty means none. Like Learning it is called under the engine's
// lock, must be quick and must not call the Engine; it must copy
// channels if it keeps them.
type Masking interface {
	Mask(unit string, channels []string)
}

// Accepting is implemented by a Learning whose model can take the current
// state of some channels as normal at once (the pipeline widens its
// learned normal to hold it, or moves the channels' means). The engine
// calls Accept when an incident is accepted as the new
// normal, with its channels (sorted), under its lock, like Mask.
type Accepting interface {
	Accept(unit string, channels []string)
}

// DefaultAcceptAfter is the bounded hold: how long an incident must stay
// flat before its channels are learned again as the new normal. It is
// chosen on the realism suite and the demo together (see README,
// Validation).
const DefaultAcceptAfter = 4 * time.Hour

// DefaultSpreadRestartsHold is the default of Rules.SpreadRestartsHold:
// a growth of an incident's location alone (a channel outside it leading
// its frames while its level stays flat) does not restart its bounded
// hold. The hold is on the statistics ("flat, no growth"); a
// disturbance that spreads also raises the level when it is more than a
// wander of the leading channel. With the restart, a flat disturbance
// whose lead wandered to another channel hours in was held as long again.
// Chosen on the realism suite over seeds and the demo together (README,
// Validation: The bounded hold over seeds).
const DefaultSpreadRestartsHold = false

// holdGrowth is the relative growth of an incident's peak ratio that
// restarts its bounded hold (design choice: a quarter more than the peak
// so far is growth, noise on a flat statistic is not).
const holdGrowth = 0.25

// holdSmooth is the span in frames of the exponential smoothing of an
// incident's level (design choice: a few minutes at the usual periods, so
// that the level is a level and not the noise's largest excursion).
const holdSmooth = 30

// holdSettle is how many frames after a growth the level is still taken
// as rising to where the growth brings it: the reference the next growth
// is measured against follows the level up for that long, without
// restarting the hold (design choice: three spans of the level's
// smoothing, after which it has covered 95 % of a step, since
// (1 − 1/holdSmooth)^(3·holdSmooth) ≈ 0.05). Measured against the level
// at the growth itself, while the smoothed level was still catching up
// with a fault ramping in, a flat fault's own slow wander (on the water
// works' pump wear ±15 % over hours) crossed the quarter and kept the
// hold restarting.
const holdSettle = 3 * holdSmooth

// holdBy names the bounded hold as the author of an automatic acceptance.
const holdBy = "modewatch bounded hold"

// holdComment is the comment of an acceptance by the bounded hold after
// flat time flat, under accept_after after, lead before it (holdbound.go).
func holdComment(flat, after, lead time.Duration) string {
	s := "flat for " + flat.String() + " (accept_after " + after.String()
	if lead > 0 {
		s += " less the " + lead.String() + " its statistics need to return once learned"
	}
	return s + "): learned as the new normal"
}

// holdState is the bounded hold of one model incident.
type holdState struct {
	growth   time.Time // last growth of the level or the location
	ref      float64   // level at the last growth, followed up while settling
	settle   int       // frames left in which ref follows the level up
	level    float64   // smoothed largest statistic/limit ratio
	accepted *Ack      // who accepted it and when; nil while held
}

func (h *holdState) start(t time.Time) { h.growth = t }

// endReason is the end reason of an incident that returned to normal.
func (h *holdState) endReason() string {
	if h.accepted != nil {
		return EndNewNormal
	}
	return EndReturned
}

// stepHolds runs the bounded hold of u's open model incidents at frame t.
func (e *Engine) stepHolds(u *unit, o *Observation, t time.Time) {
	after := u.rules.AcceptAfter
	r := 0.0
	for i := range o.Stats {
		if s := &o.Stats[i]; s.Limit > 0 && s.Value/s.Limit > r {
			r = s.Value / s.Limit
		}
	}
	// The bound of the hold (holdbound.go) holds where the incident's
	// channels are learned again once accepted.
	bound := e.masking(u)
	lead := time.Duration(0)
	if bound {
		lead = u.rules.acceptLead()
	}
	var due *incident // the first incident at the end of its hold
	below := bound && u.clearing()
	for _, inc := range u.modelIncidents() {
		l := inc.loc
		if l == nil {
			continue
		}
		h := &l.hold
		if h.level == 0 {
			// The first level is where the hold starts from, not a
			// growth: its flat time runs from the opening.
			h.level, h.ref, h.settle = r, r, holdSettle
		} else {
			h.level += (r - h.level) / holdSmooth
		}
		if bound && due == nil && after > 0 && t.Sub(h.growth) >= after && (h.accepted != nil || below) {
			due = inc
			continue
		}
		if h.accepted != nil {
			continue
		}
		if h.level > h.ref*(1+holdGrowth) {
			h.growth, h.ref, h.settle = t, h.level, holdSettle
			continue
		}
		if h.settle > 0 {
			h.settle--
			h.ref = max(h.ref, h.level)
		}
		// Under the bound, a state the statistics have already left (all
		// below their limits, the off-delay running) is not accepted.
		if after > 0 && t.Sub(h.growth) >= after-lead && !below {
			h.accepted = &Ack{By: holdBy, At: t.UTC(), Comment: holdComment(t.Sub(h.growth), after, lead)}
			e.emit(Event{Time: t, Unit: u.name, Kind: EventAccept, AlertID: inc.id})
			e.recentre(u, inc)
			e.publish(inc, t)
		}
	}
	u.loc.cover.step(r)
	if due != nil {
		e.expireHold(u, due, t) // syncs the mask
		return
	}
	e.syncMask(u, t)
}

// noteGrowth notes that the location of a model incident of u grew at t:
// it restarts the incident's bounded hold under Rules.SpreadRestartsHold.
func (l *locState) noteGrowth(u *unit, t time.Time) {
	if u.rules.SpreadRestartsHold {
		l.hold.growth = t
	}
}

// masking reports whether u learns by reconstruction around its incidents.
func (e *Engine) masking(u *unit) bool {
	_, ok := e.learn.(Masking)
	return ok && !u.rules.FreezeWhole && !u.rules.NoFreeze && !u.rules.SingleIncident
}

// syncMask hands u's model the channels of its open, not accepted model
// incidents when they changed.
func (e *Engine) syncMask(u *unit, t time.Time) {
	if !e.masking(u) {
		return
	}
	m := u.loc.mask[:0]
	if !u.maint {
		for _, inc := range u.modelIncidents() {
			if inc.loc == nil || inc.loc.hold.accepted != nil {
				continue
			}
			for _, ch := range inc.loc.channels {
				if i, ok := slices.BinarySearch(m, ch); !ok {
					m = slices.Insert(m, i, ch)
				}
			}
		}
	}
	u.loc.mask = m
	if slices.Equal(m, u.loc.sent) {
		return
	}
	u.loc.sent = append(u.loc.sent[:0], m...)
	e.learn.(Masking).Mask(u.name, m)
}

// acceptIncident applies OpAccept to one model incident: the reply text
// and whether the incident is accepted now.
func (e *Engine) acceptIncident(inc *incident, c Command) (string, bool) {
	if inc.kind != KindIncident || inc.g == nil || inc.g.qkind != "" || inc.loc == nil {
		return "alerts: only an incident of the model statistics can be accepted as normal", false
	}
	if inc.ended {
		return "alerts: the alert has ended", false
	}
	if a := inc.loc.hold.accepted; a != nil {
		return "already accepted by " + a.By, true
	}
	u := inc.u
	inc.loc.hold.accepted = &Ack{By: c.By, At: e.now().UTC(), Comment: c.Comment}
	e.emit(Event{Time: u.last, Unit: u.name, Kind: EventAccept, AlertID: inc.id})
	e.recentre(u, inc)
	e.publish(inc, u.last)
	return "accepted as normal: its channels are learned again", true
}

// acceptUnit applies OpAccept to every open model incident of a unit.
func (e *Engine) acceptUnit(c Command) Reply {
	u := e.units[c.Unit]
	if u == nil {
		return fail(c, "alerts: unknown unit %q", c.Unit)
	}
	n := 0
	for _, inc := range slices.Clone(u.modelIncidents()) {
		if inc.loc != nil && inc.loc.hold.accepted == nil {
			if _, ok := e.acceptIncident(inc, c); ok {
				n++
			}
		}
	}
	e.syncMask(u, u.last)
	if n == 0 {
		return Reply{OK: true, Unit: u.name, Message: "no open model incident to accept"}
	}
	return Reply{OK: true, Unit: u.name, Message: "accepted as normal: " + strconv.Itoa(n) + " incident(s); their channels are learned again"}
}

// Moving is implemented by a Learning whose model can take the current
// state of every channel of a unit as normal at once (a new operating
// point, newpoint.go), as Accepting does for an incident's channels. The
// engine calls Move under its lock, like Mask.
type Moving interface {
	Move(unit string)
}

// recentre tells an Accepting learner to take the current state of the
// accepted incident's channels as normal.
func (e *Engine) recentre(u *unit, inc *incident) {
	if a, ok := e.learn.(Accepting); ok && e.masking(u) {
		a.Accept(u.name, inc.loc.channels)
	}
}
