package alerts

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"slices"
	"sync"
	"time"
)

// Publisher receives every record revision the engine publishes. Publish
// must not block (a sink set queues and spools); the record is freshly
// built and may be kept.
type Publisher interface {
	Publish(r *Record)
}

// PublisherFunc adapts a function to Publisher.
type PublisherFunc func(r *Record)

// Publish calls f(r).
func (f PublisherFunc) Publish(r *Record) { f(r) }

// Learning freezes and thaws the adaptation of a unit's model. The engine
// calls it while holding its lock, from the goroutine of Observe or Handle:
// implementations must be safe for concurrent use, quick (set a flag the
// scoring loop reads before its next step) and must not call the Engine.
type Learning interface {
	Freeze(unit string)
	Thaw(unit string)
}

// Event kinds.
const (
	EventState          = "state"           // an alarm changed state (From → To)
	EventOpen           = "open"            // an incident opened (a new alert)
	EventClose          = "close"           // an incident ended
	EventFloodStart     = "flood_start"     // a unit entered a flood
	EventFloodEnd       = "flood_end"       // the flood ended
	EventChatterStart   = "chatter_start"   // an alarm group became chattering
	EventChatterEnd     = "chatter_end"     // it stayed quiet for the chatter window
	EventStale          = "stale"           // an incident has been in alarm longer than StaleAfter
	EventAck            = "ack"             // an operator acknowledged
	EventShelve         = "shelve"          // an alarm group was shelved
	EventUnshelve       = "unshelve"        // unshelved by command or expiry
	EventMaintenanceOn  = "maintenance_on"  // a unit went into maintenance
	EventMaintenanceOff = "maintenance_off" // and came out
	EventFreeze         = "freeze"          // learning of the unit frozen
	EventThaw           = "thaw"            // and thawed
	EventAccept         = "accept"          // an incident was accepted as the new normal (bounded hold or operator)
	EventReopen         = "reopen"          // an incident that had returned re-opened (reopen.go)
	EventPoint          = "point"           // a new operating point was recorded and is being learned (newpoint.go)
	EventPointEnd       = "point_end"       // its learning ended: learned, or escalated to an incident
)

// Event is one state change. Time is frame time (for commands: the unit's
// latest frame time).
type Event struct {
	Time     time.Time
	Unit     string
	Kind     string
	Alarm    string // "t2", "spe", "phi", "<kind>:<channel>" or "" for unit events
	From, To State  // for EventState
	Value    float64
	Limit    float64
	AlertID  string
}

// Errors returned by Observe (wrapped with the place).
var (
	ErrOutOfOrder = errors.New("alerts: observation not after the unit's last")
	ErrInput      = errors.New("alerts: bad observation")
)

// UnitCounters are the counters of one unit, for metrics. Totals are
// monotonic since the Engine was created; LastHour and LastDay count new
// alerts in the trailing hour and day of frame time at one-minute
// resolution (the current minute and the 59 or 1439 before it).
type UnitCounters struct {
	Unit         string
	Frames       uint64 // observations accepted
	OutOfOrder   uint64 // observations refused: time not after the unit's last
	InvalidStats uint64 // statistics skipped: non-finite value or bad limit
	Opened       uint64 // new alerts (incidents opened, including suppressed ones)
	Published    uint64 // record revisions handed to the publisher
	Floods       uint64 // floods begun
	Chattering   uint64 // chattering episodes begun

	ChatterSuppressed uint64 // re-activations folded into a chattering incident
	ShelvedSuppressed uint64 // publications hidden by a shelf
	FloodSuppressed   uint64 // publications hidden by a flood (grouped into it)
	MaintenanceFrames uint64 // observations ignored during maintenance
	Stale             uint64 // incidents flagged stale

	LastHour  int  // new alerts in the trailing hour
	LastDay   int  // new alerts in the trailing day
	Open      int  // incidents open now
	StaleOpen int  // open incidents flagged stale (ISA-18.2 target: fewer than 5 on any day [from memory])
	InFlood   bool // the unit is in a flood
	InMaint   bool // the unit is in maintenance
	Frozen    bool // learning frozen by the engine
}

// Engine holds the alarm state of every unit. It is safe for concurrent
// use: Observe from the scoring goroutine, Handle from the command
// listeners, Counters and Open from the metrics and HTTP handlers.
type Engine struct {
	mu     sync.Mutex
	cfg    Config
	pub    Publisher
	learn  Learning
	log    *slog.Logger
	now    func() time.Time
	units  map[string]*unit
	byID   map[string]*incident // open incidents and the most recent closed ones
	closed []string             // ring of closed ids kept in byID
	nextC  int
}

// closedKept is the number of closed incidents kept for late
// acknowledgement (ISA-18.2 "return to normal, unacknowledged").
const closedKept = 1024

// NewEngine returns an engine with configuration cfg (defaults filled in),
// publishing to pub. learn may be nil (no freezing); log may be nil
// (discard).
func NewEngine(cfg Config, pub Publisher, learn Learning, log *slog.Logger) (*Engine, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	if pub == nil {
		return nil, errors.New("alerts: nil publisher")
	}
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	return &Engine{
		cfg:    cfg.withDefaults(),
		pub:    pub,
		learn:  learn,
		log:    log,
		now:    time.Now,
		units:  make(map[string]*unit),
		byID:   make(map[string]*incident),
		closed: make([]string, 0, closedKept),
	}, nil
}

// SetClock replaces the wall clock used only to stamp commands (Ack.At).
// For tests.
func (e *Engine) SetClock(now func() time.Time) {
	e.mu.Lock()
	e.now = now
	e.mu.Unlock()
}

// statistic indices
var statNames = [nStats]string{StatT2, StatSPE, StatPhi, StatResidual, StatVariance, StatRelation, StatMewma, StatCreep}

// nStats is the number of statistics the engine keeps an alarm for.
const nStats = 8

func statIndex(name string) int {
	switch name {
	case StatT2:
		return 0
	case StatSPE:
		return 1
	case StatPhi:
		return 2
	case StatResidual:
		return 3
	case StatVariance:
		return 4
	case StatRelation:
		return 5
	case StatMewma:
		return 6
	case StatCreep:
		return 7
	}
	return -1
}

type qkey struct{ kind, channel string }

type unit struct {
	name     string
	rules    Rules
	last     time.Time
	tick     time.Time // latest Tick (timers run up to here without a frame)
	seen     bool
	maint    bool
	frozen   bool
	model    string // last model state reported
	stats    [nStats]Alarm
	modelG   group
	quality  map[qkey]*qalarm
	qorder   []*qalarm // the values of quality sorted by kind, then channel: every walk goes through it, so that output never depends on map order
	seq      uint64
	openings ring // start times (and incidents) of recent new alerts, for floods
	flood    *incident
	rate     minuteRing
	c        UnitCounters
	loc      unitLoc      // incidents per location (location.go)
	recent   recentClosed // model incidents that may re-open (reopen.go)
	point    pointState   // new operating point (newpoint.go)
}

type group struct {
	key          string // "model" or "<kind>:<channel>"
	qkind, chann string
	inAlarm      bool
	since        time.Time // in alarm continuously since
	inc          *incident
	shelf        *Shelve
	acts         ring // recent activation times, for chattering
	chattering   bool
	lastAct      time.Time
}

type qalarm struct {
	a   Alarm
	g   group
	seq uint64
}

type statPeak struct {
	used bool
	RecordStat
}

type incident struct {
	id        string
	u         *unit
	g         *group // nil for floods
	kind      string
	start     time.Time
	end       time.Time
	ended     bool
	updated   time.Time
	stats     [nStats]statPeak
	peak      Peak
	hasPeak   bool
	excess    []chanExcess // each channel's excess over its own limit (excess.go)
	level     *LevelStep   // a level shift's size at its peak (quality incidents)
	sev       int
	sevName   string
	contrib   []RecordContributor
	missing   []string
	ack       *Ack
	stale     bool
	chatter   *Chatter
	rev       int
	member    bool      // opened during a flood: hidden until the flood ends
	flood     *incident // the flood listing it
	memberIdx int
	endReason string
	// flood records
	members     []Member
	memberCount int
	lastPub     time.Time
	dirty       bool
	maxCount    int
	loc         *locState // location of a model incident (location.go); nil for quality and floods
	reopened    int       // times re-opened after a return (reopen.go)
	lastReopen  time.Time
}

// ring is a fixed-capacity ring of times with an optional incident each.
type ring struct {
	t    []time.Time
	inc  []*incident
	head int // index of the oldest
	n    int
}

func newRing(capacity int) ring {
	return ring{t: make([]time.Time, capacity), inc: make([]*incident, capacity)}
}

func (r *ring) push(t time.Time, inc *incident) {
	c := len(r.t)
	if r.n < c {
		i := (r.head + r.n) % c
		r.t[i], r.inc[i] = t, inc
		r.n++
		return
	}
	r.t[r.head], r.inc[r.head] = t, inc
	r.head = (r.head + 1) % c
}

// at returns the k-th most recent entry (k = 0 newest).
func (r *ring) at(k int) (time.Time, *incident) {
	i := (r.head + r.n - 1 - k) % len(r.t)
	return r.t[i], r.inc[i]
}

// countAfter counts entries with time > t.
func (r *ring) countAfter(t time.Time) int {
	k := 0
	for ; k < r.n; k++ {
		if tt, _ := r.at(k); !tt.After(t) {
			break
		}
	}
	return k
}

// quiet reports whether the newest entry of r is at least w before t.
func quiet(r *ring, t time.Time, w time.Duration) bool {
	if r.n == 0 {
		return true
	}
	last, _ := r.at(0)
	return t.Sub(last) >= w
}

func (r *ring) reset() { r.head, r.n = 0, 0; clear(r.inc) }

// minuteRing counts events per minute of frame time over the trailing day.
// Minutes are counted from the Unix epoch and are negative before 1970;
// a minute k lives in bucket floorMod(k, 1440).
type minuteRing struct {
	b    [1440]uint32
	last int64 // minute index of the newest bucket, when set
	set  bool  // last is meaningful (minute 0 is a real minute)
}

// minuteOf returns ⌊t/1 min⌋ since the Unix epoch (negative before 1970).
// [time.Time.Unix] already rounds down, so only the division needs care.
func minuteOf(t time.Time) int64 { return floorDiv(t.Unix(), 60) }

// floorDiv returns ⌊x/y⌋ for y > 0 (Go's / truncates toward zero).
func floorDiv(x, y int64) int64 {
	q := x / y
	if x%y < 0 {
		q--
	}
	return q
}

// floorMod returns x mod y in [0, y) for y > 0 (Go's % takes the sign of
// x, which makes a negative index for times before 1970).
func floorMod(x, y int64) int64 {
	m := x % y
	if m < 0 {
		m += y
	}
	return m
}

func (m *minuteRing) bucket(k int64) *uint32 { return &m.b[floorMod(k, int64(len(m.b)))] }

func (m *minuteRing) advance(t time.Time) {
	k := minuteOf(t)
	if !m.set {
		m.last, m.set = k, true
		return
	}
	if k <= m.last {
		return
	}
	if k-m.last >= int64(len(m.b)) {
		m.b = [1440]uint32{}
	} else {
		for i := m.last + 1; i <= k; i++ {
			*m.bucket(i) = 0
		}
	}
	m.last = k
}

func (m *minuteRing) add(t time.Time) {
	m.advance(t)
	*m.bucket(minuteOf(t))++
}

func (m *minuteRing) sum(minutes int) int {
	if !m.set {
		return 0
	}
	s := 0
	for i := 0; i < minutes && i < len(m.b); i++ {
		s += int(*m.bucket(m.last - int64(i)))
	}
	return s
}

func (e *Engine) unit(name string) *unit {
	u := e.units[name]
	if u != nil {
		return u
	}
	u = e.newUnitState(name)
	e.units[name] = u
	return u
}

// newUnitState returns the initial state of unit name, not registered.
func (e *Engine) newUnitState(name string) *unit {
	r, ok := e.cfg.Units[name]
	if !ok {
		r = e.cfg.Rules
	}
	u := &unit{name: name, rules: r, quality: make(map[qkey]*qalarm)}
	ar := r.alarmRule()
	for i := range u.stats {
		u.stats[i] = NewAlarm(ar)
	}
	u.modelG = group{key: GroupModel, acts: newRing(u.rules.ChatterCount)}
	u.openings = newRing(max(u.rules.FloodCount+1, e.cfg.FloodEnd))
	u.loc.newLoc = NewAlarm(ar)
	u.point.conc = NewAlarm(ar)
	u.c.Unit = name
	return u
}

func (r Rules) alarmRule() AlarmRule {
	return AlarmRule{N: r.OnCount, M: r.OnWindow, OnHold: r.OnHold, OffDelay: r.OffDelay, Deadband: r.Deadband}
}

func (e *Engine) emit(ev Event) {
	if e.cfg.OnEvent != nil {
		e.cfg.OnEvent(ev)
	}
	if e.log.Enabled(context.Background(), slog.LevelDebug) {
		e.log.Debug("alerts: event", "unit", ev.Unit, "kind", ev.Kind, "alarm", ev.Alarm,
			"from", ev.From.String(), "to", ev.To.String(), "time", ev.Time, "alert", ev.AlertID)
	}
}

// Observe feeds one scored frame. It allocates nothing in steady state
// (no state change). Errors name the unit and wrap ErrOutOfOrder or
// ErrInput; an observation with a bad entry is still applied for the rest.
func (e *Engine) Observe(o *Observation) error {
	if o.Unit == "" {
		return fmt.Errorf("%w: empty unit", ErrInput)
	}
	if o.Time.IsZero() {
		return fmt.Errorf("%w: unit %q: zero time", ErrInput, o.Unit)
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	u := e.unit(o.Unit)
	t := o.Time
	if u.seen && !t.After(u.last) {
		u.c.OutOfOrder++
		return fmt.Errorf("%w: unit %q: frame at %s is not after the last at %s", ErrOutOfOrder, o.Unit,
			t.UTC().Format(time.RFC3339Nano), u.last.UTC().Format(time.RFC3339Nano))
	}
	u.last, u.seen = t, true
	u.c.Frames++
	u.rate.advance(t)
	var bad error
	switch o.ModelState {
	case "":
	case ModelWarmup, ModelAdapting, ModelFrozen, ModelBaseline:
		u.model = o.ModelState
	default:
		bad = fmt.Errorf("%w: unit %q: unknown model state %q", ErrInput, o.Unit, o.ModelState)
	}
	if u.maint {
		u.c.MaintenanceFrames++
		return bad
	}
	// Timers first: shelf expiry, flood end, chattering quiet, stale.
	e.expireShelf(u, &u.modelG, t)
	for _, q := range u.qorder {
		e.expireShelf(u, &q.g, t)
	}
	e.checkFloodEnd(u, t)

	// Statistics.
	if o.ModelState != ModelWarmup {
		for i := range o.Stats {
			s := &o.Stats[i]
			k := statIndex(s.Name)
			if k < 0 {
				bad = fmt.Errorf("%w: unit %q: stats[%d]: unknown statistic %q", ErrInput, o.Unit, i, s.Name)
				continue
			}
			from, to, ok := u.stats[k].Step(t, s.Value, s.Limit)
			if !ok {
				u.c.InvalidStats++
				continue
			}
			if from != to {
				e.emit(Event{Time: t, Unit: u.name, Kind: EventState, Alarm: statNames[k], From: from, To: to, Value: s.Value, Limit: s.Limit})
			}
		}
	}
	in := false
	for k := range u.stats {
		in = in || u.stats[k].State().InAlarm()
	}
	if o.ModelState != ModelWarmup {
		in = e.stepPoint(u, o, t, in)
	}
	g := &u.modelG
	switch {
	case in && !g.inAlarm:
		g.inAlarm, g.since = true, t
		e.activate(u, g, t, o, nil, nil)
	case !in && g.inAlarm:
		g.inAlarm = false
		if g.inc != nil {
			e.updateModel(g.inc, o, t)
		}
		e.endAllLocated(u, t)
		e.deactivate(u, g, t)
		u.loc.cover.clear()
	case in && (g.inc != nil || u.loc.cover.on()):
		e.stepLocations(u, o, t)
	}

	// Data quality.
	u.seq++
	for i := range o.Quality {
		q := &o.Quality[i]
		if _, ok := e.cfg.Quality[q.Kind]; !ok {
			bad = fmt.Errorf("%w: unit %q: quality[%d]: unknown kind %q", ErrInput, o.Unit, i, q.Kind)
			continue
		}
		if q.Channel == "" {
			bad = fmt.Errorf("%w: unit %q: quality[%d]: empty channel", ErrInput, o.Unit, i)
			continue
		}
		e.stepQuality(u, q.Kind, q.Channel, true, t, o, q)
	}
	for i, ch := range o.Missing {
		if ch == "" {
			bad = fmt.Errorf("%w: unit %q: missing[%d]: empty channel", ErrInput, o.Unit, i)
			continue
		}
		e.stepQuality(u, QualityMissing, ch, true, t, o, nil)
	}
	for i := 0; i < len(u.qorder); i++ {
		q := u.qorder[i]
		if q.seq != u.seq {
			e.stepQuality(u, q.g.qkind, q.g.chann, false, t, o, nil)
			if q.a.State() == Normal && q.g.inc == nil && q.g.shelf == nil && !q.g.chattering && quiet(&q.g.acts, t, u.rules.ChatterWindow) {
				u.dropQuality(i)
				i--
			}
		}
	}

	// Chattering episodes that went quiet; stale alarms; pending flood update.
	e.endTimers(u, t)
	return bad
}

// Tick advances the alarm time of unit to t without a frame: it runs the
// timers a frame at t runs first, so that a unit whose frames stop (a
// gateway down, a stalled source) still ends them on time in a live
// service:
//
//	shelf expiry   at Shelve.Until
//	flood end      when fewer than FloodEnd new alerts lie in the window
//	chatter end    after ChatterWindow without a new activation
//	stale flag     after StaleAfter continuously in alarm
//
// and publishes a pending flood revision. It steps no alarm (there are no
// statistics), counts no frame and does not move the unit's last frame
// time, so a frame arriving later with a time before t (a backlog) is still
// accepted; its timers then find the work done. Events and revisions are
// stamped t. t at or before the unit's last frame or last Tick, a unit
// without frames and a unit in maintenance change nothing; Tick reports
// whether time advanced. Replays should not call it: there frame time
// rules. Safe for concurrent use; it allocates only when it publishes.
func (e *Engine) Tick(unit string, t time.Time) bool {
	e.mu.Lock()
	defer e.mu.Unlock()
	u := e.units[unit]
	if u == nil || !u.seen || u.maint || !t.After(u.last) || !t.After(u.tick) {
		return false
	}
	e.startTimers(u, t)
	e.endTimers(u, t)
	return true
}

// startTimers moves unit u's tick time to t and runs the timers a frame at
// t runs first: shelf expiry and flood end.
func (e *Engine) startTimers(u *unit, t time.Time) {
	u.tick = t
	u.rate.advance(t)
	e.expireShelf(u, &u.modelG, t)
	for _, q := range u.qorder {
		e.expireShelf(u, &q.g, t)
	}
	e.checkFloodEnd(u, t)
}

// endTimers runs the timers that close a frame at t, and Tick at t, of
// unit u: chattering episodes that went quiet and stale alarms in every
// alarm group, then a pending flood revision and the freeze state.
func (e *Engine) endTimers(u *unit, t time.Time) {
	e.checkGroup(u, &u.modelG, t)
	for _, q := range u.qorder {
		e.checkGroup(u, &q.g, t)
	}
	if f := u.flood; f != nil && f.dirty && t.Sub(f.lastPub) >= e.cfg.FloodUpdate {
		e.publish(f, t)
	}
	e.syncFreeze(u, t)
}

// LastFrame returns the frame time of unit's latest observation (zero if
// none).
func (e *Engine) LastFrame(unit string) time.Time {
	e.mu.Lock()
	defer e.mu.Unlock()
	if u := e.units[unit]; u != nil {
		return u.last
	}
	return time.Time{}
}

// newQuality returns the data-quality alarm of kind on channel ch of u,
// in its initial state, under rule (not registered).
func (u *unit) newQuality(kind, ch string, rule QualityRule) *qalarm {
	return &qalarm{
		a: NewAlarm(AlarmRule{N: 1, M: 1, OnHold: rule.Hold, OffDelay: rule.OffDelay}),
		g: group{key: kind + ":" + ch, qkind: kind, chann: ch, acts: newRing(u.rules.ChatterCount)},
	}
}

// addQuality registers the data-quality alarm q under k (replacing one
// already there), keeping u.qorder sorted by kind, then channel.
func (u *unit) addQuality(k qkey, q *qalarm) {
	i, found := slices.BinarySearchFunc(u.qorder, k, func(a *qalarm, k qkey) int {
		if c := cmp.Compare(a.g.qkind, k.kind); c != 0 {
			return c
		}
		return cmp.Compare(a.g.chann, k.channel)
	})
	if found {
		u.qorder[i] = q
	} else {
		u.qorder = slices.Insert(u.qorder, i, q)
	}
	u.quality[k] = q
}

// dropQuality removes u.qorder[i] and its entry in u.quality.
func (u *unit) dropQuality(i int) {
	q := u.qorder[i]
	delete(u.quality, qkey{q.g.qkind, q.g.chann})
	u.qorder = slices.Delete(u.qorder, i, i+1)
}

// clearQuality removes every data-quality alarm of u.
func (u *unit) clearQuality() {
	clear(u.quality)
	u.qorder = slices.Delete(u.qorder, 0, len(u.qorder))
}

// stepQuality steps the data-quality alarm kind:ch, present or not in
// this frame; m, when not nil, is the condition's entry of the frame with
// its measure (Quality.Value, Quality.Limit), which sets the incident's
// peak.
func (e *Engine) stepQuality(u *unit, kind, ch string, present bool, t time.Time, o *Observation, m *Quality) {
	k := qkey{kind, ch}
	q := u.quality[k]
	if q == nil {
		if !present {
			return
		}
		q = u.newQuality(kind, ch, e.cfg.Quality[kind])
		u.addQuality(k, q)
	}
	if present && q.seq == u.seq {
		return // named twice in one frame (Missing and Quality)
	}
	if present {
		q.seq = u.seq
	}
	v := 0.0
	if present {
		v = 2
	}
	from, to, _ := q.a.Step(t, v, 1)
	if from != to {
		e.emit(Event{Time: t, Unit: u.name, Kind: EventState, Alarm: q.g.key, From: from, To: to})
	}
	g := &q.g
	switch in := to.InAlarm(); {
	case in && !g.inAlarm:
		g.inAlarm, g.since = true, t
		e.activate(u, g, t, o, &q.a, m)
	case !in && g.inAlarm:
		g.inAlarm = false
		e.deactivate(u, g, t)
	default:
		if present && g.inc != nil && !g.inc.ended {
			g.inc.qualityPeak(m, t)
		}
	}
}

// qualityPeak takes the measure of a data-quality condition's frame m
// (nil or without a Limit: none) as inc's peak when its Value/Limit is
// the largest yet, with a level shift's size.
func (inc *incident) qualityPeak(m *Quality, t time.Time) {
	if m == nil || !(m.Limit > 0) || math.IsNaN(m.Value) || math.IsInf(m.Value, 0) {
		return
	}
	r := m.Value / m.Limit
	if inc.hasPeak && r <= inc.peak.Ratio {
		return
	}
	inc.hasPeak = true
	inc.peak = Peak{Statistic: inc.g.qkind, Value: m.Value, Limit: m.Limit, Ratio: r, Time: t.UTC()}
	if m.Level {
		inc.level = &LevelStep{Before: Number(m.Before), After: Number(m.After), Step: Number(m.Step), Window: Duration(m.Window)}
	}
}

// activate handles a group going into alarm at t: a new incident, or one
// more activation of a chattering incident.
func (e *Engine) activate(u *unit, g *group, t time.Time, o *Observation, qa *Alarm, m *Quality) {
	g.lastAct = t
	if g.chattering && g.inc != nil {
		g.inc.chatter.Activations++
		g.inc.chatter.Last = t
		u.c.ChatterSuppressed++
		if g.qkind == "" {
			e.updateModel(g.inc, o, t)
		}
		return
	}
	g.acts.push(t, nil)
	if g.qkind == "" && !u.rules.SingleIncident {
		if inc := u.reopenable(o, t); inc != nil {
			e.reopen(u, inc, o, t)
			g.inc = inc
			e.checkChatterStart(u, g, inc, t)
			e.syncFreeze(u, t)
			e.publish(inc, t)
			return
		}
	}
	inc := &incident{
		id: MakeID(u.name, g.key, t), u: u, g: g, kind: KindIncident,
		start: t.UTC(), memberIdx: -1,
	}
	if g.qkind == "" {
		inc.sev = -1
		e.updateModel(inc, o, t)
		if !u.rules.SingleIncident {
			e.locate(inc, o, t)
		}
	} else {
		inc.sevName = e.cfg.Quality[g.qkind].Severity
		inc.sev = slices.IndexFunc(u.rules.Severity, func(b SeverityBand) bool { return b.Name == inc.sevName })
		inc.missing = append(inc.missing[:0], o.Missing...)
		inc.qualityPeak(m, t)
	}
	g.inc = inc
	e.remember(inc)
	u.c.Opened++
	u.rate.add(t)
	e.emit(Event{Time: t, Unit: u.name, Kind: EventOpen, Alarm: g.key, AlertID: inc.id})
	e.checkChatterStart(u, g, inc, t)
	e.countOpening(u, inc, t)
	e.syncFreeze(u, t)
	e.publish(inc, t)
}

// checkChatterStart starts a chattering episode of g, with inc as its
// incident, when ChatterCount activations fall within ChatterWindow, i.e.
// the oldest of the last ChatterCount is less than the window before t.
func (e *Engine) checkChatterStart(u *unit, g *group, inc *incident, t time.Time) {
	if g.acts.n == len(g.acts.t) {
		if first, _ := g.acts.at(g.acts.n - 1); t.Sub(first) < u.rules.ChatterWindow {
			g.chattering = true
			inc.chatter = &Chatter{Activations: g.acts.n, First: first.UTC(), Last: t.UTC()}
			u.c.Chattering++
			e.emit(Event{Time: t, Unit: u.name, Kind: EventChatterStart, Alarm: g.key, AlertID: inc.id})
		}
	}
}

// countOpening counts a new alert of u towards its flood: more than
// FloodCount new alerts within FloodWindow.
func (e *Engine) countOpening(u *unit, inc *incident, t time.Time) {
	u.openings.push(t, inc)
	if f := u.flood; f != nil {
		e.addMember(f, inc, t)
		if t.Sub(f.lastPub) >= e.cfg.FloodUpdate {
			e.publish(f, t)
		}
	} else if n := u.openings.countAfter(t.Add(-u.rules.FloodWindow)); n > u.rules.FloodCount {
		e.startFlood(u, t, n)
	}
}

func (e *Engine) deactivate(u *unit, g *group, t time.Time) {
	inc := g.inc
	if inc == nil {
		return
	}
	if g.chattering {
		e.refreshStates(inc)
		return // stays open until quiet for the chatter window
	}
	reason := EndReturned
	if inc.loc != nil {
		reason = inc.loc.hold.endReason()
	}
	e.closeIncident(inc, t, reason)
}

// checkGroup ends quiet chattering episodes and flags stale alarms.
func (e *Engine) checkGroup(u *unit, g *group, t time.Time) {
	if g.chattering && !g.inAlarm && t.Sub(g.lastAct) >= u.rules.ChatterWindow {
		g.chattering = false
		if g.inc != nil {
			e.emit(Event{Time: t, Unit: u.name, Kind: EventChatterEnd, Alarm: g.key, AlertID: g.inc.id})
			e.closeIncident(g.inc, t, EndQuiet)
		}
	}
	// Stale: in alarm continuously for more than StaleAfter.
	if inc := g.inc; inc != nil && g.inAlarm && !inc.stale && t.Sub(g.since) > e.cfg.StaleAfter {
		inc.stale = true
		u.c.Stale++
		e.emit(Event{Time: t, Unit: u.name, Kind: EventStale, Alarm: g.key, AlertID: inc.id})
		e.publish(inc, t)
	}
}

func (e *Engine) closeIncident(inc *incident, t time.Time, reason string) {
	if t.Before(inc.start) {
		t = inc.start // a silent unit's first frame, stamped before its alert (SilenceUnseen)
	}
	inc.end, inc.ended, inc.endReason = t.UTC(), true, reason
	if inc.g != nil {
		inc.u.recent.note(inc.u, inc, reason)
		e.refreshStates(inc)
		if inc.g.inc == inc {
			inc.g.inc = nil
		} else if i := slices.Index(inc.u.loc.extra, inc); i >= 0 {
			inc.u.loc.extra = slices.Delete(inc.u.loc.extra, i, i+1)
		}
	}
	if f := inc.flood; f != nil && inc.memberIdx >= 0 && !f.ended {
		end := inc.end
		f.members[inc.memberIdx].End = &end
		f.dirty = true
	}
	e.emit(Event{Time: t, Unit: inc.u.name, Kind: EventClose, AlertID: inc.id})
	e.publish(inc, t)
	e.retire(inc)
	e.syncFreeze(inc.u, t)
}

func (e *Engine) remember(inc *incident) {
	e.byID[inc.id] = inc
}

// retire moves a closed incident to the bounded closed list.
func (e *Engine) retire(inc *incident) {
	if len(e.closed) < closedKept {
		e.closed = append(e.closed, inc.id)
		return
	}
	old := e.closed[e.nextC]
	if o := e.byID[old]; o != nil && o.ended {
		delete(e.byID, old)
	}
	e.closed[e.nextC] = inc.id
	e.nextC = (e.nextC + 1) % closedKept
}

// updateModel folds the frame's statistics into a model incident's peaks;
// it reports whether the severity rose (a revision is due).
func (e *Engine) updateModel(inc *incident, o *Observation, t time.Time) bool {
	u := inc.u
	newPeak := false
	for i := range o.Stats {
		s := &o.Stats[i]
		k := statIndex(s.Name)
		if k < 0 || !(s.Limit > 0) || math.IsInf(s.Limit, 0) || math.IsNaN(s.Value) || math.IsInf(s.Value, 0) {
			continue
		}
		st := &inc.stats[k]
		if !u.stats[k].State().InAlarm() && !st.used {
			continue
		}
		r := s.Value / s.Limit
		if !st.used || r > st.Ratio {
			st.used = true
			st.Name, st.Peak, st.Limit, st.Ratio, st.PeakTime = statNames[k], s.Value, s.Limit, r, t.UTC()
		}
		if !inc.hasPeak || r > inc.peak.Ratio {
			inc.hasPeak = true
			inc.peak = Peak{Statistic: statNames[k], Value: s.Value, Limit: s.Limit, Ratio: r, Time: t.UTC()}
			newPeak = true
		}
	}
	e.refreshStates(inc)
	inc.addExcess(o)
	if !newPeak {
		return false
	}
	// Contributors and missing channels at the frame of the peak; the
	// incident's buffers are reused. The channels over their own control
	// limit come first (overLimit), then the others, each group in the
	// order of the observation (by RBC). The record lists these after the
	// channels with an excess over the incident (excess.go).
	n := min(len(o.Contributors), e.cfg.MaxContributors)
	for len(inc.contrib) < n {
		inc.contrib = append(inc.contrib, RecordContributor{})
	}
	inc.contrib = inc.contrib[:n]
	k := 0
	for _, over := range [2]bool{true, false} {
		for i := range o.Contributors {
			c := &o.Contributors[i]
			if k == n || overLimit(c) != over {
				continue
			}
			d := &inc.contrib[k]
			k++
			d.Rank, d.Channel = k, c.Channel
			// Clamped into their ranges: rounding can leave an RBC of -1e-17.
			d.Share = min(max(finite(c.Share), 0), 1)
			d.RBC, d.RBCLimit = max(finite(c.RBC), 0), max(finite(c.Limit), 0)
			d.Modes = append(d.Modes[:0], c.Modes...)
			d.setExpected(c)
		}
	}
	inc.missing = append(inc.missing[:0], o.Missing...)
	sev := severityIndex(u.rules.Severity, inc.peak.Ratio)
	if sev > inc.sev {
		inc.sev = sev
		inc.sevName = u.rules.Severity[sev].Name
		return inc.rev > 0
	}
	return false
}

func (e *Engine) refreshStates(inc *incident) {
	for k := range inc.stats {
		if inc.stats[k].used {
			inc.stats[k].State = inc.u.stats[k].State().String()
		}
	}
}

// severityIndex returns the highest band whose ratio r reaches (the first
// band when r is below all).
func severityIndex(b []SeverityBand, r float64) int {
	i := 0
	for j := range b {
		if r >= b[j].Ratio {
			i = j
		}
	}
	return i
}

// startFlood opens the flood record of u at t listing the n new alerts of
// the trailing window.
func (e *Engine) startFlood(u *unit, t time.Time, n int) {
	f := &incident{
		id: MakeID(u.name, GroupFlood, t), u: u, kind: KindFlood, start: t.UTC(),
		memberIdx: -1, sev: -1, maxCount: n,
	}
	for k := n - 1; k >= 0; k-- {
		_, inc := u.openings.at(k)
		if inc != nil {
			e.addMember(f, inc, t)
		}
	}
	f.dirty = false
	u.flood = f
	u.c.Floods++
	e.remember(f)
	e.emit(Event{Time: t, Unit: u.name, Kind: EventFloodStart, AlertID: f.id, Value: float64(n), Limit: float64(u.rules.FloodCount)})
	e.publish(f, t)
}

func (e *Engine) addMember(f *incident, inc *incident, t time.Time) {
	f.memberCount++
	if inc.start.Equal(t.UTC()) && !inc.ended && inc.rev == 0 {
		inc.member = true // opened now: its own records wait for the flood's end
	}
	inc.flood = f
	if inc.sev > f.sev {
		f.sev, f.sevName = inc.sev, inc.sevName
	}
	if len(f.members) < e.cfg.MaxFloodMembers {
		inc.memberIdx = len(f.members)
		m := Member{ID: inc.id, Alarm: inc.g.key, Start: inc.start, Severity: inc.sevName}
		if inc.ended {
			end := inc.end
			m.End = &end
		}
		f.members = append(f.members, m)
	}
	if c := f.u.openings.countAfter(t.Add(-f.u.rules.FloodWindow)); c > f.maxCount {
		f.maxCount = c
	}
	f.dirty = true
}

// checkFloodEnd ends u's flood when the trailing count has dropped below
// FloodEnd: at the instant the FloodEnd-th most recent new alert left the
// window, e + FloodWindow.
func (e *Engine) checkFloodEnd(u *unit, t time.Time) {
	f := u.flood
	if f == nil {
		return
	}
	if u.openings.countAfter(t.Add(-u.rules.FloodWindow)) >= e.cfg.FloodEnd {
		return
	}
	te, _ := u.openings.at(e.cfg.FloodEnd - 1)
	end := te.Add(u.rules.FloodWindow)
	e.endFlood(u, end, t, EndFloodOver)
}

// endFlood closes u's flood as of end, found at frame time now (≥ end): the
// members still open are annunciated on their own in a revision of now, so
// that their peaks, which may lie after end, are never later than the
// revision's updated time.
func (e *Engine) endFlood(u *unit, end, now time.Time, reason string) {
	f := u.flood
	u.flood = nil
	e.emit(Event{Time: end, Unit: u.name, Kind: EventFloodEnd, AlertID: f.id})
	e.closeIncident(f, end, reason)
	// Members still open are annunciated on their own now.
	for _, inc := range e.openIncidents(u) {
		if inc.member {
			inc.member = false
			e.publish(inc, now)
		}
	}
}

func (e *Engine) openIncidents(u *unit) []*incident {
	var out []*incident
	if u.modelG.inc != nil {
		out = append(out, u.modelG.inc)
	}
	out = append(out, u.loc.extra...)
	for _, q := range u.qorder {
		if q.g.inc != nil {
			out = append(out, q.g.inc)
		}
	}
	// Stable: incidents that started in the same frame keep the order
	// above (model, locations, data quality by kind and channel).
	slices.SortStableFunc(out, func(a, b *incident) int { return a.start.Compare(b.start) })
	return out
}

func (e *Engine) expireShelf(u *unit, g *group, t time.Time) {
	if g.shelf == nil || t.Before(g.shelf.Until) {
		return
	}
	g.shelf = nil
	id := ""
	if g.inc != nil {
		id = g.inc.id
	}
	e.emit(Event{Time: t, Unit: u.name, Kind: EventUnshelve, Alarm: g.key, AlertID: id})
	if g.inc != nil {
		e.publish(g.inc, t)
	}
}

// syncFreeze freezes u's learning while it is in maintenance or (unless
// NoFreeze) its model statistics are in alarm, and thaws it otherwise.
// With learning by reconstruction (Masking) the alarm freezes nothing: the
// open incidents' channels are masked instead (syncMask).
func (e *Engine) syncFreeze(u *unit, t time.Time) {
	e.syncMask(u, t)
	want := u.maint || (!u.rules.NoFreeze && u.modelG.inAlarm && !e.masking(u))
	if want == u.frozen {
		return
	}
	u.frozen = want
	if want {
		if e.learn != nil {
			e.learn.Freeze(u.name)
		}
		e.emit(Event{Time: t, Unit: u.name, Kind: EventFreeze})
	} else {
		if e.learn != nil {
			e.learn.Thaw(u.name)
		}
		e.emit(Event{Time: t, Unit: u.name, Kind: EventThaw})
	}
}

// publish hands a new revision of inc to the publisher, unless it is
// suppressed: a shelf or a flood hides new incidents and their updates, but
// never the end of an incident already published. force publishes anyway
// (the revision that announces a shelf).
func (e *Engine) publish(inc *incident, t time.Time) { e.publishIf(inc, t, false) }

func (e *Engine) publishIf(inc *incident, t time.Time, force bool) {
	inc.updated = t.UTC()
	u := inc.u
	if !force && !(inc.ended && inc.rev > 0) {
		switch {
		case inc.g != nil && inc.g.shelf != nil:
			u.c.ShelvedSuppressed++
			return
		case inc.member:
			u.c.FloodSuppressed++
			return
		}
	}
	inc.rev++
	inc.dirty = false
	inc.lastPub = t
	u.c.Published++
	e.pub.Publish(e.record(inc))
}

// record builds the JSON record of inc's current revision.
func (e *Engine) record(inc *incident) *Record {
	u := inc.u
	r := &Record{
		ID: inc.id, Revision: inc.rev, Kind: inc.kind, Unit: u.name,
		Start: inc.start, Updated: inc.updated, Severity: inc.sevName,
		Statistics: []RecordStat{}, Contributors: []RecordContributor{}, Missing: []string{},
		ModelState: u.model, StaleAlarm: inc.stale, EndReason: inc.endReason, Caution: Caution,
	}
	if u.frozen {
		r.ModelState = ModelFrozen
	}
	if r.ModelState == "" {
		r.ModelState = ModelAdapting
	}
	if inc.ended {
		end := inc.end
		r.End = &end
	}
	if inc.ack != nil {
		a := *inc.ack
		r.Acknowledged = &a
	}
	if inc.chatter != nil {
		c := *inc.chatter
		r.Chattering = &c
	}
	switch {
	case inc.kind == KindFlood:
		r.Group = GroupFlood
		r.State = "active"
		if inc.ended {
			r.State = Normal.String()
		}
		r.Peak = Peak{Statistic: "new_alerts_per_window", Value: float64(inc.maxCount),
			Limit: float64(u.rules.FloodCount), Ratio: float64(inc.maxCount) / float64(u.rules.FloodCount), Time: inc.start}
		if r.Severity == "" {
			r.Severity = u.rules.Severity[0].Name
		}
		r.Members = make([]Member, len(inc.members))
		for i, m := range inc.members {
			r.Members[i] = m
			if m.End != nil {
				end := *m.End
				r.Members[i].End = &end
			}
		}
		r.MemberCount = inc.memberCount
		return r
	case inc.g.qkind != "":
		r.Group = GroupQuality
		r.Quality = &RecordQuality{Kind: inc.g.qkind, Channel: inc.g.chann}
		r.Peak = Peak{Statistic: inc.g.qkind, Value: 1, Limit: 1, Ratio: 1, Time: inc.start}
		if inc.hasPeak {
			r.Peak = inc.peak
		}
		if inc.level != nil {
			l := *inc.level
			r.Quality.Level = &l
		}
	default:
		r.Group = GroupModel
		r.Peak = inc.peak
		e.recordLocation(r, inc)
		recordReopen(r, inc)
		for _, s := range inc.stats {
			if s.used {
				r.Statistics = append(r.Statistics, s.RecordStat)
			}
		}
	}
	r.State = groupState(inc)
	if inc.g.shelf != nil {
		s := *inc.g.shelf
		r.Shelved = &s
	}
	if r.Group == GroupModel {
		r.Contributors = inc.recordContributors(r.Contributors, e.cfg.MaxContributors)
	} else {
		for _, c := range inc.contrib {
			c.Modes = slices.Clone(c.Modes)
			if c.Modes == nil {
				c.Modes = []int{}
			}
			r.Contributors = append(r.Contributors, c)
		}
	}
	r.Missing = append(r.Missing, inc.missing...)
	return r
}

func groupState(inc *incident) string {
	if inc.ended {
		return Normal.String()
	}
	g := inc.g
	if g.qkind != "" {
		if q := inc.u.quality[qkey{g.qkind, g.chann}]; q != nil {
			return visible(q.a.State()).String()
		}
		return Normal.String()
	}
	best := Normal
	for k := range inc.u.stats {
		s := visible(inc.u.stats[k].State())
		if s == Active || (s == Clearing && best != Active) {
			best = s
		}
	}
	return best.String()
}

// visible maps confirming (not yet an alarm) to normal for records.
func visible(s State) State {
	if s == Confirming {
		return Normal
	}
	return s
}

// Counters appends the counters of every unit to dst, sorted by unit.
func (e *Engine) Counters(dst []UnitCounters) []UnitCounters {
	e.mu.Lock()
	defer e.mu.Unlock()
	start := len(dst)
	for _, u := range e.units {
		c := u.c
		c.LastHour, c.LastDay = u.rate.sum(60), u.rate.sum(1440)
		for _, inc := range e.openIncidents(u) {
			c.Open++
			if inc.stale {
				c.StaleOpen++
			}
		}
		c.InFlood, c.InMaint, c.Frozen = u.flood != nil, u.maint, u.frozen
		dst = append(dst, c)
	}
	slices.SortFunc(dst[start:], func(a, b UnitCounters) int { return cmp.Compare(a.Unit, b.Unit) })
	return dst
}

// Open appends the current state of every open incident and flood to dst,
// oldest first within a unit, units sorted. Revision is that of the last
// publication; 0 marks an incident not published yet (hidden by a shelf or
// grouped into a flood). An incident's peaks and Updated are as of the
// unit's latest frame, which may be after the last publication.
func (e *Engine) Open(dst []Record) []Record {
	e.mu.Lock()
	defer e.mu.Unlock()
	names := make([]string, 0, len(e.units))
	for n := range e.units {
		names = append(names, n)
	}
	slices.Sort(names)
	for _, n := range names {
		u := e.units[n]
		if u.flood != nil {
			dst = append(dst, *e.record(u.flood))
		}
		for _, inc := range e.openIncidents(u) {
			r := e.record(inc)
			// Its peaks hold every frame seen so far, also those after
			// the last revision: updated is the latest of them.
			if u.last.After(r.Updated) {
				r.Updated = u.last.UTC()
			}
			dst = append(dst, *r)
		}
	}
	return dst
}

// finite maps NaN and ±Inf (which JSON cannot carry) to 0.
func finite(v float64) float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0
	}
	return v
}
