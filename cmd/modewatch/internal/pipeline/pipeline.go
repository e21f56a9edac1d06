// Package pipeline is the per-unit engine of modewatch: it takes aligned
// frames from package stream, splits them by plant unit, steps each unit's
// tracker, turns the scores into observations for the alarm engine and
// hands scores to an optional sink. The commands fit, replay, run and demo
// all drive the same Pipeline, so tests can drive it in-process.
//
// A unit is self-contained: its model, its channel list and its checkpoint
// depend on no other unit.
package pipeline

import (
	"errors"
	"fmt"
	"log/slog"
	"sort"
	"sync"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
)

// Options configure a Pipeline.
type Options struct {
	// Config gives units, model and alarm settings; nil means defaults.
	Config *configs.Config
	// Channels is the channel registry the frames refer to.
	Channels *stream.Channels
	// Period is the frame period (needed for the half-life).
	Period time.Duration
	// Publisher receives every alert record revision; nil discards them.
	Publisher alerts.Publisher
	// OnScore, if set, is called for every unit and frame after scoring
	// (from the frame goroutine, under the pipeline's lock).
	OnScore func(u *Unit, t time.Time)
	// Baseline, if set, starts the units it holds from a fitted model.
	Baseline *ModelFile
	// Fit makes every unit weigh all frames equally (no forgetting) unless
	// the half-life was set explicitly (FitHalfLife).
	Fit         bool
	FitHalfLife bool
	// OwnStateModes leaves each operating state's mode count to its own
	// Share rule when fitting; the default (false) lets fit give the states
	// a shared floor where their counts differ (see alignStateModes).
	OwnStateModes bool
	// Log receives unit events; nil discards them.
	Log *slog.Logger
	// Keep, if set, selects the frames by start time: a frame for which it
	// returns false is neither scored nor learned (fit's calibration
	// learns on one part of a log and scores the other).
	Keep func(t time.Time) bool
	// Workers is the number of goroutines that step the units' trackers
	// of a frame in parallel (0 or 1: the frame goroutine alone). With
	// more than one, Close stops them. Scores and alert records are the
	// same whatever the number (see Unit.finish).
	Workers int
}

// Pipeline routes frames to units. Frame must be called from one goroutine
// (the stream intake's); the read methods (Units, UnitView, ...) may be
// called concurrently from others.
type Pipeline struct {
	mu     sync.Mutex
	opt    Options
	cfg    *configs.Config
	ch     *stream.Channels
	log    *slog.Logger
	alerts *alerts.Engine
	// unitsMu guards units and byName, which only grow.
	unitsMu sync.RWMutex
	units   []*Unit
	byName  map[string]*Unit
	// owner[i] is the unit of channel i, nil when the channel is not part
	// of any model (Model false); assigned lazily as channels appear.
	owner  []*Unit
	known  int // channels of the registry already assigned
	frames uint64
	first  time.Time
	last   time.Time
	obs    alerts.Observation
	stale  time.Duration // staleness limit of the frames (silence.go)
	cross  crossStats    // fit: cross-products for context suggestions (suggest.go)
	masks  masks         // per unit: channels learned as their reconstruction (location.go)
	pool   *pool         // scoring workers (pool.go)
}

// OrDefaults gives the nil Config and Log fields of the options structs
// (Options, ReplayOptions and the service's) their meaning: it returns cfg,
// or a Config holding every default when cfg is nil, and log, or a logger
// that discards every record when log is nil.
func OrDefaults(cfg *configs.Config, log *slog.Logger) (*configs.Config, *slog.Logger) {
	if cfg == nil {
		cfg = &configs.Config{}
		cfg.ApplyDefaults()
	}
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	return cfg, log
}

// New returns a pipeline. It creates the alarm engine from the alert
// settings of the configuration.
func New(opt Options) (*Pipeline, error) {
	if opt.Channels == nil {
		return nil, errors.New("pipeline: nil channel registry")
	}
	if opt.Period <= 0 {
		return nil, errors.New("pipeline: frame period not set")
	}
	cfg, log := OrDefaults(opt.Config, opt.Log)
	p := &Pipeline{opt: opt, cfg: cfg, ch: opt.Channels, log: log, byName: map[string]*Unit{},
		stale: staleness(cfg, opt.Period)}
	pub := opt.Publisher
	if pub == nil {
		pub = alerts.PublisherFunc(func(*alerts.Record) {})
	}
	eng, err := alerts.NewEngine(AlertsConfigAt(cfg, opt.Period), pub, learning{p}, log.With("component", "alerts"))
	if err != nil {
		return nil, fmt.Errorf("pipeline: %w", err)
	}
	p.alerts = eng
	if b := opt.Baseline; b != nil {
		if time.Duration(b.Period) != opt.Period {
			return nil, fmt.Errorf("%w: fitted with frames of %v, the input is framed at %v (use --period %v)",
				ErrModelFile, time.Duration(b.Period), opt.Period, time.Duration(b.Period))
		}
		for i := range b.Units {
			if _, err := p.unitFromModel(&b.Units[i], opt.Period); err != nil {
				return nil, err
			}
		}
	}
	p.pool = newPool(opt.Workers) // last: nothing after it can fail
	return p, nil
}

// Alerts returns the alarm engine (for commands and the API).
func (p *Pipeline) Alerts() *alerts.Engine { return p.alerts }

// AlertsConfig converts the alarm settings of a configuration.
func AlertsConfig(c *configs.Config) alerts.Config { return AlertsConfigAt(c, 0) }

// AlertsConfigAt is AlertsConfig at frame period period: the default
// on-delay (3 of 5 frames) is widened to span alerts.on_span of plant time
// (alerts.SpanOnDelay; a period of 0 leaves it); another on_delay is taken
// as given unless on_span is set too. The period also sets each unit's
// relearn span (relearnSpan; 0 with a period of 0).
func AlertsConfigAt(c *configs.Config, period time.Duration) alerts.Config {
	rules := func(a configs.Alerts, m configs.Model) alerts.Rules {
		r := alerts.Rules{
			OnCount:  a.OnDelay.N,
			OnWindow: a.OnDelay.M,
			OffDelay: a.OffDelay,
			Deadband: a.Deadband,
			NoFreeze: a.FreezeOnAlert != nil && !*a.FreezeOnAlert,

			FreezeWhole:    a.LearnAroundAlert != nil && !*a.LearnAroundAlert,
			SingleIncident: a.IncidentsPerLocation != nil && !*a.IncidentsPerLocation,
			AcceptAfter:    a.AcceptAfter,
			LocationQuiet:  a.LocationQuiet,
			ReopenWithin:   a.ReopenWithin,
			SpecificShare:  a.SpecificShare,
			NoNewPoint:     newPointOff(a),

			NoPointByResidual: !alerts.DefaultPointByResidual,

			SpreadRestartsHold: alerts.DefaultSpreadRestartsHold,
		}
		if a.NewPointRes != nil {
			r.NoPointByResidual = !*a.NewPointRes
		}
		if a.SpreadRestartsHold != nil {
			r.SpreadRestartsHold = *a.SpreadRestartsHold
		}
		r.OnCount, r.OnWindow = spanOnDelay(a, r.OnCount, r.OnWindow, period)
		r.RelearnSpan = relearnSpan(m, period)
		if r.OffDelay == 0 {
			r.OffDelay = -1 // configured as zero: no off-delay
		}
		for _, b := range a.Severity {
			r.Severity = append(r.Severity, alerts.SeverityBand{Name: b.Name, Ratio: b.Ratio})
		}
		r.FloodCount, r.FloodWindow = a.Flood.Count, a.Flood.Window
		r.ChatterCount, r.ChatterWindow = a.Chatter.Count, a.Chatter.Window
		return r
	}
	top := c.Alerts.Over(configs.DefaultAlerts())
	ac := alerts.Config{
		Rules:         rules(top, c.Model.Over(configs.DefaultModel())),
		Units:         map[string]alerts.Rules{},
		FloodCount:    top.Flood.Count,
		FloodWindow:   top.Flood.Window,
		ChatterCount:  top.Chatter.Count,
		ChatterWindow: top.Chatter.Window,
	}
	for i := range c.Units {
		ac.Units[c.Units[i].Name] = rules(c.UnitAlerts(i), c.UnitModel(i))
	}
	return ac
}

// newPointOff reports whether a turns the new-operating-point rule off
// (alerts.new_point false; unset: alerts.DefaultNewPoint).
func newPointOff(a configs.Alerts) bool {
	if a.NewPoint != nil {
		return !*a.NewPoint
	}
	return !alerts.DefaultNewPoint
}

// learning lets the alarm engine freeze and thaw a unit's adaptation. It is
// called under the alarm engine's lock, possibly from an HTTP command, so
// it only sets a flag that the unit reads before its next step.
type learning struct{ p *Pipeline }

func (l learning) Freeze(unit string) { l.set(unit, true) }
func (l learning) Thaw(unit string)   { l.set(unit, false) }
func (l learning) set(unit string, v bool) {
	if l.p.opt.Fit {
		return // fit learns from every frame of its (normal) input
	}
	if u := l.p.lookup(unit); u != nil {
		u.alertFrozen.Store(v)
	}
}

// lookup finds a unit without the pipeline lock (the map only grows under
// the lock, and Freeze/Thaw may come from inside Frame).
func (p *Pipeline) lookup(name string) *Unit {
	p.unitsMu.RLock()
	defer p.unitsMu.RUnlock()
	return p.byName[name]
}

// unitOf returns the name of the unit channel c belongs to: the configured
// unit listing it, else the channel's own Unit (default its measurement).
func (p *Pipeline) unitOf(c stream.Channel) string {
	for i := range p.cfg.Units {
		for _, n := range p.cfg.Units[i].Channels {
			if n == c.Name {
				return p.cfg.Units[i].Name
			}
		}
	}
	if c.Unit != "" {
		return c.Unit
	}
	return c.Measurement
}

// assign gives every channel of the registry not yet seen to its unit.
// Called under p.mu.
func (p *Pipeline) assign() {
	n := p.ch.Len()
	for i := p.known; i < n; i++ {
		c := p.ch.Channel(i)
		p.owner = append(p.owner, nil)
		if !c.Model {
			continue
		}
		name := p.unitOf(c)
		u := p.byName[name]
		if u == nil {
			u = p.rebuild(name)
		}
		if u.addChannel(i, c.Name) {
			p.owner[i] = u
		}
		p.assignContext(i, c, u)
	}
	p.known = n
}

func (p *Pipeline) newUnit(name string) *Unit {
	u := newUnit(p, name)
	p.register(u)
	return u
}

// register adds u to the units.
func (p *Pipeline) register(u *Unit) {
	name := u.Name
	p.unitsMu.Lock()
	p.units = append(p.units, u)
	sort.Slice(p.units, func(i, j int) bool { return p.units[i].Name < p.units[j].Name })
	p.byName[name] = u
	p.unitsMu.Unlock()
}

// Frame scores one aligned frame for every unit: the handler for
// [stream.NewIntake]. It returns nil: a unit that fails keeps its error
// (shown in its view) and stops scoring, the others go on.
func (p *Pipeline) Frame(f *stream.Frame) error {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.known < p.ch.Len() {
		p.assign()
	}
	if p.opt.Keep != nil && !p.opt.Keep(f.Start) {
		return nil
	}
	if p.frames == 0 {
		p.first = f.Start
	}
	p.frames++
	p.last = f.Start
	if p.opt.Fit {
		p.addCross(f)
	}
	if len(p.pool.workers) == 1 {
		for _, u := range p.units {
			u.step(f)
		}
		return nil
	}
	p.pool.place(p.units)
	p.pool.learn(f)
	for _, u := range p.units {
		if u.parallel() {
			u.finish(f)
		} else {
			u.step(f) // whole, in unit order (see Unit.parallel)
		}
	}
	return nil
}

// Frames returns the number of frames seen and the start times of the
// first and the last.
func (p *Pipeline) Frames() (n uint64, first, last time.Time) {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.frames, p.first, p.last
}

// Units returns the units, sorted by name. The slice is a copy; the units
// are live (use their View methods for a consistent snapshot).
func (p *Pipeline) Units() []*Unit {
	p.unitsMu.RLock()
	defer p.unitsMu.RUnlock()
	return append([]*Unit(nil), p.units...)
}

// Unit returns the unit called name, or nil.
func (p *Pipeline) Unit(name string) *Unit { return p.lookup(name) }
