package alerts

import (
	"errors"
	"fmt"
	"strings"
	"time"
)

// A new operating point.
//
// A planned move of a unit to a point its normal log never reached (a
// setpoint raised beyond its usual steps, a load the plant has not run at)
// keeps the unit's correlation structure: every channel follows through
// the same relations, only further along them. It shows in Hotelling's T²
// (and so in φ), which measures the distance along the modes, while the
// squared prediction error and the residual statistics, which measure a
// break of the relations, stay within their limits. A fault that adds a
// new event to the process (a sensor bias, a broken relation) moves the
// frame off the model plane and shows in them (Kourti & MacGregor,
// "Process analysis, monitoring and diagnosis, using multivariate
// projection methods", Chemometr. Intell. Lab. Syst. 28, 1995; Qin,
// "Statistical process monitoring: basics and beyond", J. Chemometr.
// 17, 2003, §3: a T² alarm alone may be a change of operating region, an
// SPE alarm a change of the correlation; both from memory).
//
// A single-channel fault can also show in T² alone, when its channel leads
// a mode of its own (a level, a bearing temperature). It differs from a
// move in where the excess sits: reconstructing that one channel removes
// most of the index (Contributor.Share ≥ Rules.SpecificShare, the
// "specific" frame of reopen.go; Alcalá & Qin 2009), while a move along a
// mode spreads it over the mode's channels.
//
// So, when a unit's model alarm would open an incident with only T² and φ
// in alarm, no residual statistic in alarm, a frame that names no channel
// of its own (not specific), no model incident open or able to re-open,
// and no new-operating-point record of the unit within the last
// AcceptAfter, the engine publishes one informational record instead
// (KindNotice, GroupPoint, EndNoted: no alert, never counted as one) and
// hands every channel of the frame to the Accepting learner, which widens
// the unit's learned normal to hold the new point (the accept path of
// hold.go; pipeline.DefaultAcceptWeight). While the point is being learned
// T² and φ open nothing. The point escalates to an incident, opened at the
// frame it escalates on, when
//
//   - a residual statistic (SPE, res, var, rel) goes into alarm,
//   - the T² excess concentrates on one channel (T² over its limit on
//     specific frames for the unit's on-delay: the same N of M rule), or
//   - T² or φ is still in alarm PointSettle after the record;
//
// it ends, silently, once T² and φ are back to normal. Nothing is judged
// while the model is taking the point in (Observation.TakingIn): its
// statistics are then measured against a model in change. A second excursion
// within AcceptAfter of the record is an alert like any other, so the rule
// never floods and never learns a sequence of excursions unseen.
// Unless Rules.NoPointByResidual, SPE and φ may show such a move too, judged
// by the residual Mahalanobis statistic alone (newpointres.go).
// Rules.NoNewPoint turns the rule off, and so does a negative
// Rules.AcceptAfter: where nothing is ever taken as the new normal, a new
// operating point is not either.

// GroupPoint is the group of a new-operating-point record.
const GroupPoint = "operating_point"

// DefaultNewPoint: the new-operating-point rule is on by default (chosen on
// the realism suite and the demo together, see the README).
const DefaultNewPoint = true

// PointSettle is how long T² and φ may stay in alarm after a new operating
// point's record before it escalates to an incident (design choice: the
// widening takes 30 frames, at most 30 min at the suite's slowest period
// of 60 s, then the off-delay; twice that is left for the statistics to
// come back).
const PointSettle = time.Hour

// pointState is a unit's new-operating-point rule.
type pointState struct {
	learning bool      // a point is being learned: T² and φ open nothing
	last     time.Time // the unit's latest new-operating-point record
	conc     Alarm     // on-delay of T² over its limit on specific frames
}

// newPointRule reports whether u runs the new-operating-point rule: it
// needs a learner that can widen the unit's normal, and a bounded hold.
func (e *Engine) newPointRule(u *unit) bool {
	_, ok := e.learn.(Moving)
	return ok && !u.rules.NoNewPoint && u.rules.AcceptAfter >= 0 && e.masking(u)
}

// residualInAlarm reports whether a statistic of u that rd reads as a
// break (other than T² and φ) is in alarm.
func (u *unit) residualInAlarm(rd pointReading) bool {
	for k := range u.stats {
		if rd.breaks(k) && u.stats[k].State().InAlarm() {
			return true
		}
	}
	return false
}

// residualOver reports whether a statistic of u that rd reads as a break
// (other than T² and φ) is in alarm and over its limit in o (an alarm
// clearing after its return, e.g. from the frames the model was taking a
// point in, does not count).
func (u *unit) residualOver(o *Observation, rd pointReading) bool {
	for i := range o.Stats {
		s := &o.Stats[i]
		k := statIndex(s.Name)
		if k < 0 || !rd.breaks(k) || !u.stats[k].State().InAlarm() {
			continue
		}
		if s.Limit > 0 && s.Value > s.Limit {
			return true
		}
	}
	return false
}

// PointShare is the share of the index one channel must explain for a
// frame's excess to be concentrated on it (design choice: half of it; on
// the realism suite a planned move's first channel explains 0.20, a
// seeded move in TestNewOperatingPoint 0.15 to 0.26, a sensor bias on a
// channel that leads a mode of its own 0.6 to 0.8 there; a quarter, the
// share that names a place, gives the same suite but turned one seeded
// move of three into an alert).
const PointShare = 0.5

// Concentrated reports whether o's first leading channel alone explains
// at least PointShare of the index (see [unit.specific]): a model alarm on
// such a frame is no new operating point. The budget calibration asks it
// of every held-out frame (alerts.calibrate_points).
func Concentrated(o *Observation) bool {
	var buf [LeadCount]string
	lead, s := leading(buf[:0], o)
	return len(lead) > 0 && s >= PointShare
}

// stepPoint runs u's new-operating-point rule at frame o (time t); in says
// whether a statistic of u is in alarm. It returns whether the unit's
// model alarm is in alarm for the rest of Observe: false while a new point
// is being learned on T² and φ alone.
func (e *Engine) stepPoint(u *unit, o *Observation, t time.Time, in bool) bool {
	if !e.newPointRule(u) {
		return in
	}
	p := &u.point
	rd := u.readPoint(o)
	r := rd.ratio
	if p.learning && o.TakingIn {
		p.conc.Reset(t)
		return false // the model is taking the point in: nothing to judge yet
	}
	// The on-delay of the concentration counts the frames of T² over its
	// limit that one channel explains, and, while a point is learned, the
	// frames of a move off the mode plane that name a place; a frame of the
	// latter kind before any point keeps the unit from noting one there and
	// then, but does not hold its rule up afterwards.
	along, conc := u.concentrated(o, rd) // the only walks of o's contributors here
	v := 0.0
	if along || (p.learning && conc) {
		v = 2
	}
	p.conc.Step(t, v, 1)
	g := &u.modelG
	if p.learning {
		switch {
		case u.residualOver(o, rd) || p.conc.State().InAlarm() || t.Sub(p.last) >= PointSettle:
			p.learning = false // escalates: the model alarm activates on this frame
			e.emit(Event{Time: t, Unit: u.name, Kind: EventPointEnd, Alarm: GroupPoint})
			return in
		case !in:
			p.learning = false // learned: back within the limits
			e.emit(Event{Time: t, Unit: u.name, Kind: EventPointEnd, Alarm: GroupPoint})
		}
		return false
	}
	if !in || r <= 1 || conc || g.inAlarm || g.inc != nil || len(u.loc.extra) > 0 || u.residualInAlarm(rd) ||
		p.conc.State() != Normal || u.reopenable(o, t) != nil ||
		(!p.last.IsZero() && t.Sub(p.last) < u.rules.AcceptAfter) {
		return in
	}
	p.learning, p.last = true, t
	e.notePoint(u, o, t, rd)
	return false
}

// notePoint publishes the new-operating-point record of u at frame o, read
// as rd, and hands every channel of the frame to the learner as the new
// normal.
func (e *Engine) notePoint(u *unit, o *Observation, t time.Time, rd pointReading) {
	r := rd.ratio
	var lead strings.Builder
	for i := range o.Contributors {
		c := &o.Contributors[i]
		if i < 3 {
			if i > 0 {
				lead.WriteString(", ")
			}
			fmt.Fprintf(&lead, "%s %.0f %%", c.Channel, 100*c.Share)
		}
	}
	along, within := "along its modes", "SPE and the residual statistics within their limits"
	if rd.speMoves {
		along, within = "along relations it learned", "the residual statistic res within its limit"
	}
	text := fmt.Sprintf("new operating point: %s moved beyond its normal range %s "+
		"(%s %.2f times its limit, spread over its channels: %s; %s); "+
		"learned as normal from now on. An alert follows if a residual statistic goes over its limit, "+
		"one channel comes to explain the excess, or %s is not back within %v",
		u.name, along, rd.display(), r, lead.String(), within, rd.display(), PointSettle)
	rec := e.noticeRecord(u, GroupPoint, "move", text, t)
	for i := range o.Contributors {
		if i == maxNoticeContributors {
			break
		}
		c := &o.Contributors[i]
		d := RecordContributor{Rank: i + 1, Channel: c.Channel, Share: min(max(finite(c.Share), 0), 1),
			RBC: max(finite(c.RBC), 0), RBCLimit: max(finite(c.Limit), 0), Modes: append([]int{}, c.Modes...)}
		d.setExpected(c)
		rec.Contributors = append(rec.Contributors, d)
	}
	rec.Peak = Peak{Statistic: rd.stat, Value: r, Limit: 1, Ratio: r, Time: t.UTC()}
	e.emit(Event{Time: t, Unit: u.name, Kind: EventPoint, Alarm: GroupPoint})
	e.pub.Publish(rec)
	if m, ok := e.learn.(Moving); ok {
		m.Move(u.name)
	}
}

// maxNoticeContributors bounds the channels a new-operating-point record
// lists.
const maxNoticeContributors = 5

// snapPoint is the new-operating-point rule of a unit in a snapshot.
type snapPoint struct {
	Learning bool      `json:"learning,omitempty"`
	Last     time.Time `json:"last"`
	Conc     snapAlarm `json:"concentrated"`
}

// snap returns p for a snapshot, nil when it holds nothing.
func (p *pointState) snap() *snapPoint {
	c := snapAlarmOf(&p.conc)
	if !p.learning && p.last.IsZero() && State(c.State) == Normal && c.Window == 0 {
		return nil
	}
	return &snapPoint{Learning: p.learning, Last: p.last, Conc: c}
}

// restore sets p from a snapshot (nil: the initial state, kept) of a
// unit whose latest frame was at last. A record time after that frame, or
// a point being learned without one, is no state the rule reaches: the
// first would keep the rule from noting any point until that time (the
// AcceptAfter gap), the second escalate at the next frame. Both are
// refused, leaving p as it was.
func (p *pointState) restore(s *snapPoint, last time.Time) error {
	if s == nil {
		return nil
	}
	switch {
	case s.Last.After(last):
		return fmt.Errorf("new_point: last record %s after the unit's last frame %s",
			s.Last.UTC().Format(time.RFC3339Nano), last.UTC().Format(time.RFC3339Nano))
	case s.Learning && s.Last.IsZero():
		return errors.New("new_point: learning a point that has no record time")
	}
	p.learning, p.last = s.Learning, s.Last
	restoreAlarm(&p.conc, s.Conc)
	return nil
}
