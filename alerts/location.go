package alerts

import (
	"fmt"
	"slices"
	"time"
)

// Incidents per location.
//
// A unit's model statistics (T², SPE, φ) are one alarm per unit, but a unit
// may hold several faults at once in different equipment. Each model
// incident therefore has a location: the channels given in
// Observation.Location when it opened (the frame's leading channels,
// widened by the channels the modes holding them move with; computed by
// the caller, which knows the model). While the unit is in alarm, every
// frame is attributed by its leading contributors (the first LeadCount
// ranked channels over their own limits and near the first, see
// LeadShare):
//
//   - a frame whose first leading channel lies in an open incident's
//     location supports that incident: its peaks and contributors are
//     updated from the frame;
//   - a frame whose first leading channel lies outside every open location
//     counts towards the on-delay of a new incident (the unit's own
//     on-delay rule, OnCount of OnWindow such frames, so a second fault is
//     reported with the same delay as on a quiet unit); when it is met a
//     new incident opens, with its own id and record, located at the
//     frame's channels that no open incident holds;
//   - a leading channel outside every location that leads growFrames
//     frames of one incident grows that incident's location by the frame's
//     location; a location that grows into another's merges the later
//     incident into the earlier one: the later closes with end reason
//     EndMerged and MergedInto set, the earlier lists it in Merged and
//     takes its location;
//   - a frame without a leading channel supports the unit's first
//     incident (which, opened without one, is located by the first frame
//     that has one).
//
// An incident whose location has had no channel over its limit for
// Rules.LocationQuiet while the unit stays in alarm ends (EndReturned, or
// EndNewNormal once accepted); all of them end when the unit's statistics
// return to normal. Floods count every new incident; chattering stays a
// property of the unit's model alarm (the first incident).
// Rules.SingleIncident restores one model incident per unit.

// End reasons of model incidents (besides EndReturned).
const (
	// EndMerged: the incident grew into an earlier one of the same unit
	// and continues as part of it (Record.MergedInto).
	EndMerged = "merged"
	// EndNewNormal: the incident had been accepted as the plant's new
	// normal (by its bounded hold or by an operator) and its statistics
	// then returned below the limits.
	EndNewNormal = "new_normal"
)

// LeadCount and LeadShare define a frame's leading contributors: the
// first LeadCount ranked channels that exceed their own limits and whose
// RBC is at least LeadShare of the first one's (design choice: a fault in
// one piece of equipment puts one to three channels well over their own
// limits first, RBC ranking the faulty channel first for a single-sensor
// fault, Alcalá & Qin 2009; a channel over its own limit by chance, which
// happens in α of the frames, is far below the fault's channel). The
// caller's Observation.Location widens the same channels.
const (
	LeadCount = 3
	LeadShare = 0.25
)

// DefaultLocationQuiet is how long an incident's location may go without
// a channel over its own contribution limit, while the unit stays in
// alarm for other reasons, before the incident ends (design choice: three
// default off-delays, so that a fault whose contributions flicker around
// their limits is not split into a train of incidents).
const DefaultLocationQuiet = 15 * time.Minute

// locState is the location of a model incident.
type locState struct {
	channels    []string  // sorted
	lastSupport time.Time // last frame with a location channel over its limit
	merged      []string  // ids merged into this incident
	mergedInto  string
	hold        holdState      // bounded hold and acceptance (hold.go)
	cand        map[string]int // leading channels outside the location: frames they led in
}

// growFrames is how many frames a channel outside an incident's location
// must lead, in frames the incident leads, before the location grows to
// it (design choice: a fault that spreads leads every frame; a channel
// over its limit near the first by chance does so in well under 10⁻³ of
// the frames).
const growFrames = 10

// grows counts the leading channels outside the location and reports
// whether one of them has now led growFrames frames.
func (l *locState) grows(lead []string) bool {
	grow := false
	for _, ch := range lead {
		if l.holds(ch) {
			continue
		}
		if l.cand == nil {
			l.cand = map[string]int{}
		}
		l.cand[ch]++
		if l.cand[ch] >= growFrames {
			grow = true
		}
	}
	if grow {
		clear(l.cand)
	}
	return grow
}

// unitLoc is a unit's state of incidents per location.
type unitLoc struct {
	extra  []*incident // open model incidents after the first (g.inc), oldest first
	newLoc Alarm       // on-delay of a new location
	all    []*incident // scratch: g.inc then extra
	mask   []string    // scratch: channels of open, not accepted incidents
	sent   []string    // the mask last handed to Masking
	cover  holdCover   // channels of incidents past their hold, while in alarm (holdbound.go)
}

func (l *locState) holds(ch string) bool {
	_, ok := slices.BinarySearch(l.channels, ch)
	return ok
}

// add merges the channels chs into the location (sorted, no repeats) and
// reports whether it grew.
func (l *locState) add(chs []string) bool {
	grew := false
	for _, c := range chs {
		if i, ok := slices.BinarySearch(l.channels, c); !ok {
			l.channels = slices.Insert(l.channels, i, c)
			grew = true
		}
	}
	return grew
}

// modelIncidents returns u's open model incidents, oldest first (scratch
// slice, valid until the next call).
func (u *unit) modelIncidents() []*incident {
	all := u.loc.all[:0]
	if u.modelG.inc != nil {
		all = append(all, u.modelG.inc)
	}
	all = append(all, u.loc.extra...)
	u.loc.all = all
	return all
}

// frameLocation returns the channels of o's location: o.Location, or the
// leading contributors when the caller gives none.
func frameLocation(o *Observation, lead []string) []string {
	if len(o.Location) > 0 {
		return o.Location
	}
	return lead
}

// leading appends to dst the channels of the first LeadCount contributors
// of o that exceed their own limit, and returns the Share of the first of
// them (0 when there is none; see unit.specific).
func leading(dst []string, o *Observation) ([]string, float64) {
	top, share := 0.0, 0.0
	for i := range o.Contributors {
		c := &o.Contributors[i]
		if len(dst) == LeadCount {
			break
		}
		if IsLeading(c.RBC, c.Limit, top) {
			if top == 0 {
				top, share = c.RBC, c.Share
			}
			dst = append(dst, c.Channel)
		}
	}
	return dst, share
}

// overLimit reports whether c's reconstruction-based contribution is over
// its own control limit: such a channel is significant for the alarm on
// its own, whatever its share of the index (IsLeading with no first
// leading contributor yet).
func overLimit(c *Contributor) bool { return IsLeading(c.RBC, c.Limit, 0) }

// IsLeading reports whether a contributor with reconstruction-based
// contribution rbc and limit lim is leading, given the RBC of the first
// leading contributor of the frame (0 while there is none): over its
// limit and at least LeadShare of the first.
func IsLeading(rbc, lim, first float64) bool {
	return lim > 0 && rbc > lim && rbc >= LeadShare*first
}

// locate sets the location of a model incident opening on frame o.
func (e *Engine) locate(inc *incident, o *Observation, t time.Time) {
	var buf [LeadCount]string
	lead, _ := leading(buf[:0], o)
	inc.loc = &locState{lastSupport: t}
	inc.loc.add(frameLocation(o, lead))
	inc.loc.hold.start(t)
}

// stepLocations attributes one frame of a unit in alarm to its open model
// incidents (see the package comment above): support, growth, merges and
// the on-delay of a new location. It allocates nothing unless an incident
// opens, grows or merges.
func (e *Engine) stepLocations(u *unit, o *Observation, t time.Time) {
	g := &u.modelG
	if u.rules.SingleIncident {
		if g.inc != nil && e.updateModel(g.inc, o, t) {
			e.publish(g.inc, t)
		}
		return
	}
	var buf [LeadCount]string
	lead, share := leading(buf[:0], o)
	all := u.modelIncidents()
	// The first leading channel attributes the frame.
	var first *incident
	if len(lead) > 0 {
		for _, inc := range all {
			if inc.loc != nil && inc.loc.holds(lead[0]) {
				first = inc
				break
			}
		}
	}
	switch {
	case len(lead) == 0:
		// Nothing over its own limit: the frame belongs to the unit's
		// first incident (T² or SPE high without one channel to blame).
		u.loc.newLoc.Step(t, 0, 1)
		if g.inc != nil {
			e.support(g.inc, o, t)
		}
	case first == nil && g.inc != nil && g.inc.loc != nil && len(g.inc.loc.channels) == 0:
		// The unit's incident opened without a channel to blame: the
		// first frame with one locates it.
		u.loc.newLoc.Step(t, 0, 1)
		g.inc.loc.add(frameLocation(o, lead))
		g.inc.dirty = true
		e.support(g.inc, o, t)
	case first == nil && u.loc.cover.holds(lead[0]):
		// Led by the channels of an incident that ended at the end of
		// its hold (holdbound.go): no new incident.
		u.loc.newLoc.Step(t, 0, 1)
	case first == nil && !u.specific(lead, share):
		// A frame that points at no place of its own (reopen.go) does
		// not count towards a new location, nor does it speak for an
		// open one.
		u.loc.newLoc.Step(t, 0, 1)
	case first == nil:
		if _, to, _ := u.loc.newLoc.Step(t, 2, 1); to == Active {
			u.loc.newLoc.Reset(t)
			e.openLocation(u, o, lead, t)
		}
	default:
		// The frame belongs to first, but with the open incidents'
		// channels reconstructed it stays out of control, led by a
		// channel outside every location (Observation.Beyond): a second
		// fault in other equipment, on the same on-delay as on a quiet
		// unit.
		if len(o.Beyond) > 0 && !u.located(o.Beyond[0]) {
			if _, to, _ := u.loc.newLoc.Step(t, 2, 1); to == Active {
				u.loc.newLoc.Reset(t)
				e.support(first, o, t)
				e.openLocation(u, o, o.Beyond, t)
				break
			}
		} else {
			u.loc.newLoc.Step(t, 0, 1)
		}
		// Growth: a frame whose leading channels all lie in first's
		// location or in none widens first by the frame's location; if it
		// now meets another incident's, they grew into each other.
		if e.leadsOnly(u, first, lead) && first.loc.grows(lead) && first.loc.add(frameLocation(o, lead)) {
			first.loc.noteGrowth(u, t)
			first.dirty = true
			first = e.absorbOverlaps(u, first, t)
		}
		e.support(first, o, t)
	}
	// Other incidents with a location channel over its limit are supported
	// too (a fault that persists while another leads); the rest go quiet,
	// and one quiet for LocationQuiet ends while another stays open.
	for {
		var quiet *incident
		all := u.modelIncidents()
		for _, inc := range all {
			if inc.loc == nil || inc == first {
				continue
			}
			if inc.loc.overLimit(o) {
				inc.loc.lastSupport = t
			} else if quiet == nil && len(all) > 1 && t.Sub(inc.loc.lastSupport) >= u.rules.LocationQuiet {
				quiet = inc
			}
		}
		if quiet == nil || !e.endLocated(u, quiet, t, quiet.loc.hold.endReason()) {
			break
		}
	}
	e.stepHolds(u, o, t)
}

// located reports whether ch lies in the location of an open model
// incident of u, or of one that ended at the end of its hold while the
// unit stays in alarm (holdbound.go).
func (u *unit) located(ch string) bool {
	if u.loc.cover.holds(ch) {
		return true
	}
	for _, inc := range u.modelIncidents() {
		if inc.loc != nil && inc.loc.holds(ch) {
			return true
		}
	}
	return false
}

func (l *locState) holdsAny(chs []string) bool {
	for _, c := range chs {
		if l.holds(c) {
			return true
		}
	}
	return false
}

// overLimit reports whether a contributor of o in the location exceeds its
// own limit.
func (l *locState) overLimit(o *Observation) bool {
	for i := range o.Contributors {
		c := &o.Contributors[i]
		if c.Limit > 0 && c.RBC > c.Limit && l.holds(c.Channel) {
			return true
		}
	}
	return false
}

// support folds frame o into inc (peaks, contributors) and publishes a
// revision when its severity rose or its location grew.
func (e *Engine) support(inc *incident, o *Observation, t time.Time) {
	if inc.loc != nil {
		inc.loc.lastSupport = t
	}
	if e.updateModel(inc, o, t) || inc.dirty {
		e.publish(inc, t)
	}
}

// openLocation opens a new model incident of u at t for the frame o whose
// leading channels lie outside every open location.
func (e *Engine) openLocation(u *unit, o *Observation, lead []string, t time.Time) {
	g := &u.modelG
	inc := &incident{
		id: MakeID(u.name, g.key, t), u: u, g: g, kind: KindIncident,
		start: t.UTC(), memberIdx: -1, sev: -1,
	}
	inc.loc = &locState{lastSupport: t}
	inc.loc.hold.start(t)
	loc := frameLocation(o, lead)
	inc.loc.add(lead[:1]) // the first leading channel is outside every location
	for _, ch := range loc {
		if !u.located(ch) {
			inc.loc.add([]string{ch})
		}
	}
	e.updateModel(inc, o, t)
	if g.inc == nil {
		g.inc = inc // the unit's incident ended at the end of its hold (holdbound.go)
	} else {
		u.loc.extra = append(u.loc.extra, inc)
	}
	e.remember(inc)
	u.c.Opened++
	u.rate.add(t)
	e.emit(Event{Time: t, Unit: u.name, Kind: EventOpen, Alarm: g.key, AlertID: inc.id})
	e.countOpening(u, inc, t)
	e.syncMask(u, t)
	e.publish(inc, t)
}

// absorbOverlaps merges into inc every later or earlier open incident of u
// whose location now meets inc's (they grew into each other); the earlier
// of each pair survives.
// It returns the surviving incident.
func (e *Engine) absorbOverlaps(u *unit, inc *incident, t time.Time) *incident {
	for _, other := range slices.Clone(u.modelIncidents()) {
		if other == inc || other.ended || other.loc == nil || !other.loc.holdsAny(inc.loc.channels) {
			continue
		}
		if other.start.Before(inc.start) {
			e.merge(other, inc, t)
			inc = other
		} else {
			e.merge(inc, other, t)
		}
	}
	return inc
}

// leadsOnly reports whether every leading channel lies in inc's location
// or in no open incident's location (nor among the channels covered after
// an incident's hold ended, holdbound.go: accepted, they are not masked
// again by a growth).
func (e *Engine) leadsOnly(u *unit, inc *incident, lead []string) bool {
	for _, ch := range lead {
		if inc.loc.holds(ch) {
			continue
		}
		if u.loc.cover.holds(ch) {
			return false
		}
		for _, other := range u.modelIncidents() {
			if other != inc && other.loc != nil && other.loc.holds(ch) {
				return false
			}
		}
	}
	return true
}

// merge closes later (EndMerged, MergedInto) into earlier, which takes its
// location and lists it.
func (e *Engine) merge(earlier, later *incident, t time.Time) {
	if later.ended || earlier.ended {
		return
	}
	earlier.loc.add(later.loc.channels)
	mergeExcess(earlier, later)
	earlier.loc.merged = append(earlier.loc.merged, later.id)
	earlier.loc.merged = append(earlier.loc.merged, later.loc.merged...)
	later.loc.mergedInto = earlier.id
	if later.hasPeak && (!earlier.hasPeak || later.peak.Ratio > earlier.peak.Ratio) {
		earlier.peak, earlier.hasPeak = later.peak, true
		earlier.contrib = append(earlier.contrib[:0], later.contrib...)
		if later.sev > earlier.sev {
			earlier.sev, earlier.sevName = later.sev, later.sevName
		}
	}
	e.endLocated(later.u, later, t, EndMerged)
	earlier.dirty = true
	e.publish(earlier, t)
}

// endLocated ends one model incident of u while the unit may stay in
// alarm: the first incident's place goes to the oldest other one. It
// reports false when the incident stays open (the unit's chattering
// episode, which ends by its own timer).
func (e *Engine) endLocated(u *unit, inc *incident, t time.Time, reason string) bool {
	g := &u.modelG
	primary := g.inc == inc
	if primary && g.chattering {
		return false
	}
	e.closeIncident(inc, t, reason)
	if primary && len(u.loc.extra) > 0 {
		g.inc = u.loc.extra[0]
		u.loc.extra = slices.Delete(u.loc.extra, 0, 1)
	}
	e.syncMask(u, t)
	return true
}

// endAllLocated ends every incident after the first when the unit's model
// alarm returns to normal (the first is ended by deactivate).
func (e *Engine) endAllLocated(u *unit, t time.Time) {
	for len(u.loc.extra) > 0 {
		inc := u.loc.extra[0]
		e.closeIncident(inc, t, inc.loc.hold.endReason()) // removes it from extra
	}
	u.loc.newLoc.Reset(t)
}

// recordLocation fills the location fields and the model state of the
// record of model incident inc.
func (e *Engine) recordLocation(r *Record, inc *incident) {
	l := inc.loc
	if l == nil {
		return
	}
	r.Location = slices.Clone(l.channels)
	r.Merged = slices.Clone(l.merged)
	r.MergedInto = l.mergedInto
	if a := l.hold.accepted; a != nil {
		c := *a
		r.Accepted = &c
	}
	if e.masking(inc.u) && !inc.u.frozen && r.ModelState == ModelAdapting {
		r.ModelState = ModelReconstructing
		if l.hold.accepted != nil {
			r.ModelState = ModelAccepted
		}
	}
}

// snapLoc is the snapshot of a model incident's location and hold.
type snapLoc struct {
	Channels    []string       `json:"channels"`
	LastSupport time.Time      `json:"last_support"`
	Merged      []string       `json:"merged,omitempty"`
	MergedInto  string         `json:"merged_into,omitempty"`
	Growth      time.Time      `json:"hold_growth"`
	Ref         float64        `json:"hold_ref"`
	Settle      int            `json:"hold_settle,omitempty"`
	Level       float64        `json:"hold_level"`
	Candidates  map[string]int `json:"candidates,omitempty"`
	Accepted    *Ack           `json:"accepted,omitempty"`
}

func snapLocOf(l *locState) *snapLoc {
	if l == nil {
		return nil
	}
	return &snapLoc{Channels: l.channels, LastSupport: l.lastSupport, Merged: l.merged, MergedInto: l.mergedInto,
		Growth: l.hold.growth, Ref: l.hold.ref, Settle: l.hold.settle, Level: l.hold.level, Accepted: l.hold.accepted, Candidates: l.cand}
}

func (s *snapLoc) restore() *locState {
	if s == nil {
		return nil
	}
	l := &locState{lastSupport: s.LastSupport, merged: s.Merged, mergedInto: s.MergedInto,
		hold: holdState{growth: s.Growth, ref: s.Ref, settle: s.Settle, level: s.Level, accepted: s.Accepted}, cand: s.Candidates}
	l.add(s.Channels)
	return l
}

// restoreLocations restores u's open model incidents after the first and
// the on-delay of a new location from su. A model incident without a
// location (a version-1 snapshot) is located at its contributors over
// their own limits (with none, at the next frame that has some).
func (e *Engine) restoreLocations(u *unit, su snapUnit, lookup func(string) (*incident, error)) error {
	for _, id := range su.Extra {
		inc, err := lookup(id)
		if err != nil {
			return err
		}
		if inc == nil || inc.g != nil {
			return fmt.Errorf("incident %q listed twice", id)
		}
		inc.g, inc.u = &u.modelG, u
		u.loc.extra = append(u.loc.extra, inc)
	}
	if su.NewLoc != nil {
		restoreAlarm(&u.loc.newLoc, *su.NewLoc)
	}
	if err := u.point.restore(su.Point, su.Last); err != nil {
		return err
	}
	if err := su.Cover.restore(&u.loc.cover); err != nil {
		return err
	}
	if u.rules.SingleIncident {
		return nil
	}
	for _, inc := range u.modelIncidents() {
		if inc.loc == nil {
			inc.loc = &locState{lastSupport: u.last}
			inc.loc.hold.start(u.last)
			for _, c := range inc.contrib {
				if c.RBCLimit > 0 && c.RBC > c.RBCLimit {
					inc.loc.add([]string{c.Channel})
				}
			}
		}
	}
	return nil
}
