package alerts

import (
	"cmp"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"time"
)

// snapshotVersion is the version of the snapshot format written by
// Snapshot. Version 2 adds incidents per location and the bounded hold
// (snapUnit.Extra, NewLoc; snapIncident.Location); Restore reads versions
// 1 and 2 (a version-1 model incident is located at its contributors) and
// refuses others.
const snapshotVersion = 2

type snapAlarm struct {
	State  snapState `json:"state"`
	Window uint64    `json:"window"`
	Since  time.Time `json:"since"`
}

// snapState is an alarm state in a snapshot. It reads the names the states
// had before they were renamed ("pending" is now confirming, "returning" is
// now clearing), so that a checkpoint written by an earlier release still
// restores its open incidents; it writes the current names.
type snapState State

// MarshalText writes the state's current name.
func (s snapState) MarshalText() ([]byte, error) { return State(s).MarshalText() }

// UnmarshalText reads a current or a former state name.
func (s *snapState) UnmarshalText(b []byte) error {
	switch string(b) {
	case "pending":
		*s = snapState(Confirming)
		return nil
	case "returning":
		*s = snapState(Clearing)
		return nil
	}
	return (*State)(s).UnmarshalText(b)
}

type snapGroup struct {
	InAlarm    bool        `json:"in_alarm"`
	Since      time.Time   `json:"since"`
	Inc        string      `json:"incident,omitempty"`
	Shelf      *Shelve     `json:"shelf,omitempty"`
	Acts       []time.Time `json:"activations,omitempty"` // oldest first
	Chattering bool        `json:"chattering,omitempty"`
	LastAct    time.Time   `json:"last_activation"`
}

type snapQuality struct {
	Kind    string    `json:"kind"`
	Channel string    `json:"channel"`
	Alarm   snapAlarm `json:"alarm"`
	Group   snapGroup `json:"group"`
}

type snapOpening struct {
	T   time.Time `json:"t"`
	Inc string    `json:"incident,omitempty"`
}

type snapStat struct {
	Used bool `json:"used"`
	RecordStat
}

type snapIncident struct {
	ID          string              `json:"id"`
	Kind        string              `json:"kind"`
	Group       string              `json:"group,omitempty"` // group key; "" for floods
	Start       time.Time           `json:"start"`
	End         time.Time           `json:"end"`
	Ended       bool                `json:"ended"`
	Updated     time.Time           `json:"updated"`
	Stats       [nStats]snapStat    `json:"stats"`
	Peak        Peak                `json:"peak"`
	HasPeak     bool                `json:"has_peak"`
	Sev         int                 `json:"sev"`
	SevName     string              `json:"sev_name"`
	Contrib     []RecordContributor `json:"contrib,omitempty"`
	Excess      []chanExcess        `json:"excess,omitempty"`
	Level       *LevelStep          `json:"level,omitempty"`
	Missing     []string            `json:"missing,omitempty"`
	Ack         *Ack                `json:"ack,omitempty"`
	Stale       bool                `json:"stale,omitempty"`
	Chatter     *Chatter            `json:"chatter,omitempty"`
	Rev         int                 `json:"rev"`
	Member      bool                `json:"member,omitempty"`
	Flood       string              `json:"flood,omitempty"`
	MemberIdx   int                 `json:"member_idx"`
	EndReason   string              `json:"end_reason,omitempty"`
	Members     []Member            `json:"members,omitempty"`
	MemberCount int                 `json:"member_count,omitempty"`
	LastPub     time.Time           `json:"last_pub"`
	Dirty       bool                `json:"dirty,omitempty"`
	MaxCount    int                 `json:"max_count,omitempty"`
	Location    *snapLoc            `json:"location,omitempty"`
	Reopened    int                 `json:"reopened,omitempty"`
	LastReopen  time.Time           `json:"last_reopened"`
}

type snapUnit struct {
	Name      string            `json:"name"`
	Last      time.Time         `json:"last"`
	Seen      bool              `json:"seen"`
	Maint     bool              `json:"maintenance"`
	Frozen    bool              `json:"frozen"`
	Model     string            `json:"model_state"`
	Stats     [nStats]snapAlarm `json:"stats"`
	ModelG    snapGroup         `json:"model_group"`
	Quality   []snapQuality     `json:"quality,omitempty"`
	Openings  []snapOpening     `json:"openings,omitempty"` // oldest first
	Flood     string            `json:"flood,omitempty"`
	RateLast  int64             `json:"rate_last_minute"`
	RateCount map[int]uint32    `json:"rate_counts,omitempty"` // bucket → count, non-zero only
	Counters  UnitCounters      `json:"counters"`
	Extra     []string          `json:"extra_incidents,omitempty"`  // open model incidents after the first, oldest first
	NewLoc    *snapAlarm        `json:"new_location,omitempty"`     // on-delay of a new location
	Recent    []string          `json:"recent_incidents,omitempty"` // model incidents that may re-open, oldest end first
	Point     *snapPoint        `json:"new_point,omitempty"`        // the new-operating-point rule (newpoint.go)
	Cover     *snapCover        `json:"hold_cover,omitempty"`       // channels of incidents past their hold (holdbound.go)
}

type snapshot struct {
	Version   int            `json:"version"`
	Unit      string         `json:"unit,omitempty"` // set by SnapshotUnit: the one unit it holds
	Units     []snapUnit     `json:"units"`
	Incidents []snapIncident `json:"incidents"`
}

// Snapshot writes the engine's state (alarm states, open incidents,
// shelves, maintenance, floods, chattering, counters) as JSON to w, for
// Restore after a restart, so that incidents open at shutdown continue
// under the same id instead of being raised again. Closed incidents kept
// for late acknowledgement are not included.
func (e *Engine) Snapshot(w io.Writer) error {
	e.mu.Lock()
	names := make([]string, 0, len(e.units))
	for n := range e.units {
		names = append(names, n)
	}
	slices.Sort(names)
	us := make([]*unit, len(names))
	for i, n := range names {
		us[i] = e.units[n]
	}
	data, err := json.Marshal(e.snapshotOf(us, ""))
	e.mu.Unlock()
	return writeSnapshot(w, data, err)
}

// SnapshotUnit writes the state of one unit (as Snapshot does for all):
// its alarms, open incidents and floods, shelves, maintenance, chattering
// and counters. Units share nothing in the engine, so this is everything
// another engine needs to carry the unit on (RestoreUnit), e.g. on another
// service instance. A unit the engine has not seen is written with no
// state, and RestoreUnit of that snapshot resets the unit.
func (e *Engine) SnapshotUnit(name string, w io.Writer) error {
	if name == "" {
		return fmt.Errorf("%w: empty unit", ErrInput)
	}
	e.mu.Lock()
	var us []*unit
	if u := e.units[name]; u != nil {
		us = append(us, u)
	}
	data, err := json.Marshal(e.snapshotOf(us, name))
	e.mu.Unlock()
	return writeSnapshot(w, data, err)
}

func writeSnapshot(w io.Writer, data []byte, err error) error {
	if err != nil {
		return fmt.Errorf("alerts: snapshot: %w", err)
	}
	if _, err := w.Write(data); err != nil {
		return fmt.Errorf("alerts: snapshot: %w", err)
	}
	return nil
}

// snapshotOf captures units us (and the incidents they reference). Called
// under e.mu.
func (e *Engine) snapshotOf(us []*unit, only string) *snapshot {
	s := &snapshot{Version: snapshotVersion, Unit: only, Units: []snapUnit{}, Incidents: []snapIncident{}}
	incs := map[*incident]bool{}
	for _, u := range us {
		su := snapUnit{
			Name: u.name, Last: u.last, Seen: u.seen, Maint: u.maint, Frozen: u.frozen, Model: u.model,
			ModelG: snapGroupOf(&u.modelG, incs), RateLast: u.rate.last, Counters: u.c,
		}
		for k := range u.stats {
			su.Stats[k] = snapAlarmOf(&u.stats[k])
		}
		for _, inc := range u.loc.extra {
			su.Extra = append(su.Extra, inc.id)
			incs[inc] = true
		}
		for _, inc := range u.recent.incs {
			su.Recent = append(su.Recent, inc.id)
			incs[inc] = true
		}
		if nl := snapAlarmOf(&u.loc.newLoc); State(nl.State) != Normal || nl.Window != 0 {
			su.NewLoc = &nl
		}
		su.Point = u.point.snap()
		su.Cover = snapCoverOf(&u.loc.cover)
		for _, q := range u.qorder { // sorted by kind, then channel
			su.Quality = append(su.Quality, snapQuality{Kind: q.g.qkind, Channel: q.g.chann, Alarm: snapAlarmOf(&q.a), Group: snapGroupOf(&q.g, incs)})
		}
		for k := u.openings.n - 1; k >= 0; k-- {
			t, inc := u.openings.at(k)
			o := snapOpening{T: t}
			if inc != nil {
				o.Inc = inc.id
				incs[inc] = true
			}
			su.Openings = append(su.Openings, o)
		}
		if u.flood != nil {
			su.Flood = u.flood.id
			incs[u.flood] = true
		}
		for i, c := range u.rate.b {
			if c != 0 {
				if su.RateCount == nil {
					su.RateCount = map[int]uint32{}
				}
				su.RateCount[i] = c
			}
		}
		s.Units = append(s.Units, su)
	}
	for inc := range incs {
		if inc.flood != nil {
			incs[inc.flood] = true
		}
	}
	for inc := range incs {
		s.Incidents = append(s.Incidents, snapIncidentOf(inc))
	}
	slices.SortFunc(s.Incidents, func(a, b snapIncident) int { return cmp.Compare(a.ID, b.ID) })
	return s
}

// incidentFields pairs each field of an incident that its snapshot
// carries as it is with the snapshot's field: the one list that
// snapIncidentOf (save) and buildIncidents (restore) both walk, so that no
// field is saved and not restored, or the other way round. The statistics
// and the location are converted, and the group and the flood resolved by
// name, apart.
func incidentFields(inc *incident, si *snapIncident) []fieldPair {
	return []fieldPair{
		pair(&inc.id, &si.ID), pair(&inc.kind, &si.Kind), pair(&inc.start, &si.Start), pair(&inc.end, &si.End),
		pair(&inc.ended, &si.Ended), pair(&inc.updated, &si.Updated), pair(&inc.peak, &si.Peak),
		pair(&inc.hasPeak, &si.HasPeak), pair(&inc.sev, &si.Sev), pair(&inc.sevName, &si.SevName),
		pair(&inc.contrib, &si.Contrib), pair(&inc.missing, &si.Missing), pair(&inc.ack, &si.Ack),
		pair(&inc.stale, &si.Stale), pair(&inc.chatter, &si.Chatter), pair(&inc.rev, &si.Rev),
		pair(&inc.member, &si.Member), pair(&inc.memberIdx, &si.MemberIdx), pair(&inc.endReason, &si.EndReason),
		pair(&inc.members, &si.Members), pair(&inc.memberCount, &si.MemberCount), pair(&inc.lastPub, &si.LastPub),
		pair(&inc.dirty, &si.Dirty), pair(&inc.maxCount, &si.MaxCount), pair(&inc.reopened, &si.Reopened),
		pair(&inc.lastReopen, &si.LastReopen), pair(&inc.excess, &si.Excess), pair(&inc.level, &si.Level),
	}
}

// fieldPair copies one field from the live state into its snapshot (save)
// or back (restore).
type fieldPair struct{ save, restore func() }

// pair is the fieldPair of a live field and its snapshot field, of the
// same type.
func pair[T any](live, snap *T) fieldPair {
	return fieldPair{save: func() { *snap = *live }, restore: func() { *live = *snap }}
}

// snapIncidentOf returns the snapshot of inc.
func snapIncidentOf(inc *incident) snapIncident {
	var si snapIncident
	for _, f := range incidentFields(inc, &si) {
		f.save()
	}
	for k, st := range inc.stats {
		si.Stats[k] = snapStat{Used: st.used, RecordStat: st.RecordStat}
	}
	if inc.g != nil {
		si.Group = inc.g.key
	}
	si.Location = snapLocOf(inc.loc)
	if inc.flood != nil {
		si.Flood = inc.flood.id
	}
	return si
}

func snapAlarmOf(a *Alarm) snapAlarm {
	return snapAlarm{State: snapState(a.state), Window: a.window, Since: a.since}
}

func snapGroupOf(g *group, incs map[*incident]bool) snapGroup {
	s := snapGroup{InAlarm: g.inAlarm, Since: g.since, Shelf: g.shelf, Chattering: g.chattering, LastAct: g.lastAct}
	if g.inc != nil {
		s.Inc = g.inc.id
		incs[g.inc] = true
	}
	for k := g.acts.n - 1; k >= 0; k-- {
		t, _ := g.acts.at(k)
		s.Acts = append(s.Acts, t)
	}
	return s
}

// Restore replaces the engine's state by a snapshot written by Snapshot
// (or SnapshotUnit). The engine's own configuration applies from now on.
// Units whose learning was frozen are frozen again through the Learning
// callback. An error leaves the engine unchanged.
func (e *Engine) Restore(r io.Reader) error {
	s, err := readSnapshot(r)
	if err != nil {
		return err
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	units, incs, err := e.build(s)
	if err != nil {
		return err
	}
	e.units = units
	e.byID = make(map[string]*incident, len(incs))
	e.closed, e.nextC = e.closed[:0], 0
	for id, inc := range incs {
		if !inc.ended {
			e.byID[id] = inc
		}
	}
	for _, u := range e.units {
		if u.frozen && e.learn != nil {
			e.learn.Freeze(u.name)
		}
		e.syncMask(u, u.last)
	}
	return nil
}

// RestoreUnit replaces the state of unit name, and only that unit, by its
// part of a snapshot written by SnapshotUnit(name, ...) or by Snapshot.
// Every other unit, its incidents and their ids are left as they are, so a
// unit's checkpoint can be moved into an engine that runs other units. A
// snapshot without state for the unit resets it. The unit's learning is
// frozen or thawed through the Learning callback to match the restored
// state. An error (damaged snapshot, or one written by SnapshotUnit for
// another unit) leaves the engine unchanged.
func (e *Engine) RestoreUnit(name string, r io.Reader) error {
	if name == "" {
		return fmt.Errorf("%w: empty unit", ErrInput)
	}
	s, err := readSnapshot(r)
	if err != nil {
		return err
	}
	if s.Unit != "" && s.Unit != name {
		return fmt.Errorf("alerts: restore: the snapshot holds unit %q, not %q", s.Unit, name)
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	units, incs, err := e.build(s)
	if err != nil {
		return err
	}
	u := units[name]
	old := e.units[name]
	if old != nil {
		for id, inc := range e.byID {
			if inc.u == old {
				delete(e.byID, id)
			}
		}
	}
	if u == nil {
		delete(e.units, name)
	} else {
		e.units[name] = u
		for id, inc := range incs {
			if inc.u == u && !inc.ended {
				e.byID[id] = inc
			}
		}
	}
	if e.learn != nil {
		switch {
		case u != nil && u.frozen:
			e.learn.Freeze(name)
		case old != nil && old.frozen:
			e.learn.Thaw(name)
		}
		if u != nil {
			e.syncMask(u, u.last)
		} else if old != nil && len(old.loc.sent) > 0 && e.masking(old) {
			e.learn.(Masking).Mask(name, nil)
		}
	}
	return nil
}

func readSnapshot(r io.Reader) (*snapshot, error) {
	var s snapshot
	dec := json.NewDecoder(r)
	if err := dec.Decode(&s); err != nil {
		return nil, fmt.Errorf("alerts: restore: %w", err)
	}
	if s.Version != snapshotVersion && s.Version != 1 {
		return nil, fmt.Errorf("alerts: restore: snapshot version %d, want 1 or %d", s.Version, snapshotVersion)
	}
	return &s, nil
}

// build makes the units and incidents of s without touching the engine's
// state (only its configuration): the incidents, then the units that
// reference them, then each incident's unit and group. Called under e.mu.
func (e *Engine) build(s *snapshot) (map[string]*unit, map[string]*incident, error) {
	fail := func(err error) (map[string]*unit, map[string]*incident, error) {
		return nil, nil, fmt.Errorf("alerts: restore: %w", err)
	}
	incs, err := buildIncidents(s)
	if err != nil {
		return fail(err)
	}
	lookup := func(id string) (*incident, error) {
		if id == "" {
			return nil, nil
		}
		inc := incs[id]
		if inc == nil {
			return nil, fmt.Errorf("unknown incident %q", id)
		}
		return inc, nil
	}
	for _, si := range s.Incidents {
		f, err := lookup(si.Flood)
		if err != nil {
			return fail(err)
		}
		incs[si.ID].flood = f
	}
	units := make(map[string]*unit, len(s.Units))
	for _, su := range s.Units {
		if su.Name == "" || units[su.Name] != nil {
			return fail(fmt.Errorf("empty or repeated unit %q", su.Name))
		}
		u, err := e.buildUnit(su, lookup)
		if err != nil {
			return fail(fmt.Errorf("unit %q: %w", su.Name, err))
		}
		units[su.Name] = u
	}
	if err := attachIncidents(s, units, incs); err != nil {
		return fail(err)
	}
	return units, incs, nil
}

// buildIncidents makes the incidents of s, with their statistics' peaks
// and locations.
func buildIncidents(s *snapshot) (map[string]*incident, error) {
	incs := make(map[string]*incident, len(s.Incidents))
	for i := range s.Incidents {
		si := &s.Incidents[i]
		if si.ID == "" || incs[si.ID] != nil {
			return nil, fmt.Errorf("incident %d: empty or repeated id %q", i, si.ID)
		}
		inc := &incident{}
		for _, f := range incidentFields(inc, si) {
			f.restore()
		}
		for k, st := range si.Stats {
			inc.stats[k] = statPeak{used: st.Used, RecordStat: st.RecordStat}
		}
		if l := si.Location; l != nil && (l.Settle < 0 || l.Settle > holdSettle || !(l.Ref >= 0) || !(l.Level >= 0) ||
			math.IsInf(l.Ref, 0) || math.IsInf(l.Level, 0)) {
			return nil, fmt.Errorf("incident %q: bounded hold level %v, reference %v, settling %d frames (at most %d)",
				si.ID, l.Level, l.Ref, l.Settle, holdSettle)
		}
		inc.loc = si.Location.restore()
		incs[si.ID] = inc
	}
	return incs, nil
}

// buildUnit makes the state of one unit of a snapshot: alarms, groups,
// locations, data-quality alarms, openings, flood and alert-rate ring.
func (e *Engine) buildUnit(su snapUnit, lookup func(string) (*incident, error)) (*unit, error) {
	u := e.newUnitState(su.Name)
	u.last, u.seen, u.maint, u.frozen, u.model, u.c = su.Last, su.Seen, su.Maint, su.Frozen, su.Model, su.Counters
	for k := range u.stats {
		restoreAlarm(&u.stats[k], su.Stats[k])
	}
	if err := e.restoreGroup(u, &u.modelG, su.ModelG, lookup); err != nil {
		return nil, err
	}
	if err := e.restoreLocations(u, su, lookup); err != nil {
		return nil, err
	}
	if len(su.Recent) > recentKept {
		return nil, fmt.Errorf("%d recent incidents (that may re-open), at most %d", len(su.Recent), recentKept)
	}
	for _, id := range su.Recent {
		inc, err := lookup(id)
		if err != nil {
			return nil, err
		}
		if inc == nil || inc.g != nil || !inc.ended {
			return nil, fmt.Errorf("recent incident %q listed twice or not ended", id)
		}
		inc.g, inc.u = &u.modelG, u
		u.recent.incs = append(u.recent.incs, inc)
	}
	for _, sq := range su.Quality {
		rule, ok := e.cfg.Quality[sq.Kind]
		if !ok {
			return nil, fmt.Errorf("unknown quality kind %q", sq.Kind)
		}
		q := u.newQuality(sq.Kind, sq.Channel, rule)
		restoreAlarm(&q.a, sq.Alarm)
		if err := e.restoreGroup(u, &q.g, sq.Group, lookup); err != nil {
			return nil, err
		}
		u.addQuality(qkey{sq.Kind, sq.Channel}, q)
	}
	for _, o := range su.Openings {
		inc, err := lookup(o.Inc)
		if err != nil {
			return nil, err
		}
		u.openings.push(o.T, inc)
	}
	f, err := lookup(su.Flood)
	if err != nil {
		return nil, err
	}
	u.flood = f
	// Minute 0 is a real minute (1970-01-01 00:00 UTC): the ring is set
	// when it has a newest minute or any count. A set ring at minute 0
	// with no counts restores as unset, which counts the same.
	u.rate.last, u.rate.set = su.RateLast, su.RateLast != 0 || len(su.RateCount) > 0
	for i, c := range su.RateCount {
		if i < 0 || i >= len(u.rate.b) {
			return nil, fmt.Errorf("rate bucket %d", i)
		}
		u.rate.b[i] = c
	}
	return u, nil
}

// attachIncidents gives every incident its unit (floods and closed members
// through the unit or member that references them) and a closed incident
// kept only for flood membership a detached group carrying its key.
func attachIncidents(s *snapshot, units map[string]*unit, incs map[string]*incident) error {
	for _, inc := range incs {
		if inc.u == nil {
			// floods and closed members listed in openings: their unit
			// is the one that references them
			for _, u := range units {
				if u.flood == inc {
					inc.u = u
				}
				for k := 0; k < u.openings.n; k++ {
					if _, oi := u.openings.at(k); oi == inc {
						inc.u = u
					}
				}
			}
		}
	}
	for _, inc := range incs {
		if inc.u == nil && inc.kind == KindFlood {
			// an ended flood still named by one of its members
			for _, m := range incs {
				if m.flood == inc && m.u != nil {
					inc.u = m.u
				}
			}
		}
		if inc.u == nil {
			return fmt.Errorf("incident %q belongs to no unit", inc.id)
		}
		if inc.kind != KindFlood && inc.g == nil {
			key := ""
			for _, si := range s.Incidents {
				if si.ID == inc.id {
					key = si.Group
				}
			}
			inc.g = &group{key: key}
		}
	}
	return nil
}

func restoreAlarm(a *Alarm, s snapAlarm) {
	a.state, a.since = State(s.State), s.Since
	a.window = s.Window
	if a.rule.M < 64 {
		a.window &= 1<<uint(a.rule.M) - 1
	}
	if a.state > Clearing {
		a.state = Normal
	}
}

func (e *Engine) restoreGroup(u *unit, g *group, s snapGroup, lookup func(string) (*incident, error)) error {
	g.inAlarm, g.since, g.shelf, g.chattering, g.lastAct = s.InAlarm, s.Since, s.Shelf, s.Chattering, s.LastAct
	for _, t := range s.Acts {
		g.acts.push(t, nil)
	}
	inc, err := lookup(s.Inc)
	if err != nil {
		return err
	}
	if inc != nil {
		if inc.g != nil {
			return errors.New("incident " + inc.id + " in two groups")
		}
		inc.g, inc.u = g, u
		g.inc = inc
		if g.chattering && inc.chatter == nil {
			return errors.New("chattering group without chatter record: " + inc.id)
		}
	}
	return nil
}
