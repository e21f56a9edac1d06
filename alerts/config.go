package alerts

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// Defaults, each with its source; "[from memory]" marks a figure recalled from
// the standard and not confirmed in public text.
const (
	// DefaultOnCount and DefaultOnWindow: active when over the limit in 3 of
	// the last 5 frames. Design choice: with independent frames at a per-frame
	// false-alarm rate α = 0.01 the rule fires with probability
	// Σ_{k=3..5} C(5,k) αᵏ(1−α)^{5−k} = 9.8506×10⁻⁶ per frame (binomial tail).
	DefaultOnCount  = 3
	DefaultOnWindow = 5
	// DefaultOffDelay is how long a statistic must stay below
	// limit·(1 − Deadband) before the alarm returns to normal (design).
	DefaultOffDelay = 5 * time.Minute
	// DefaultDeadband is 5 % of the limit: the flow/level starting point of
	// ISA-18.2-2009 §10 [from memory] carried over to the statistic/limit ratio.
	DefaultDeadband = 0.05
	// DefaultFloodCount: a flood begins when more than 10 new alerts arrive
	// in DefaultFloodWindow (ISA-18.2 definition as quoted in public
	// secondary text; EEMUA 191 KPI grid "flood 10 in 10 min").
	DefaultFloodCount  = 10
	DefaultFloodWindow = 10 * time.Minute
	// DefaultFloodEnd: the flood ends when the trailing count drops below 5
	// (ISA-18.2 as quoted in public secondary text).
	DefaultFloodEnd = 5
	// DefaultChatterCount activations within DefaultChatterWindow make an
	// alarm chattering ("three or more times in a minute", a starting
	// criterion quoted in public secondary text).
	DefaultChatterCount  = 3
	DefaultChatterWindow = time.Minute
	// DefaultStaleAfter: an alert in alarm continuously for more than 24 h is
	// a stale alarm [quoted in public secondary text].
	DefaultStaleAfter = 24 * time.Hour
	// DefaultMaxShelve bounds a shelve command (design; ISA-18.2 requires
	// shelving to be time-limited, the figure is ours).
	DefaultMaxShelve = 24 * time.Hour
	// DefaultMaxContributors is the number of ranked channels kept in a record.
	DefaultMaxContributors = 5
	// DefaultMaxFloodMembers caps the member list of a flood record; further
	// members are only counted.
	DefaultMaxFloodMembers = 200
	// DefaultFloodUpdate is the least frame time between two revisions of a
	// flood record that only add members.
	DefaultFloodUpdate = time.Minute
)

// Caution is carried by every alert record.
const Caution = "Advisory only: verify in the field and follow site procedures."

// SeverityBand names the severity of an alert whose peak statistic/limit
// ratio is at least Ratio.
type SeverityBand struct {
	Name  string
	Ratio float64
}

// DefaultSeverity are the default bands of the peak ratio value/limit
// (design choice, matching the service configuration defaults): low ≥ 1,
// medium ≥ 2, high ≥ 4.
func DefaultSeverity() []SeverityBand {
	return []SeverityBand{{"low", 1}, {"medium", 2}, {"high", 4}}
}

// Rules are the alarm settings of the statistics of one unit. The zero
// value means the defaults.
type Rules struct {
	// OnCount and OnWindow: active when over the limit in OnCount of the last
	// OnWindow frames (1 ≤ OnCount ≤ OnWindow ≤ 64). Defaults 3 of 5.
	OnCount, OnWindow int
	// OnHold additionally requires the alarm to have been confirming this long
	// (frame time). Default 0.
	OnHold time.Duration
	// OffDelay: time below limit·(1 − Deadband) before going back to normal.
	// Default 5 min. Negative means zero.
	OffDelay time.Duration
	// Deadband as a fraction of the limit, in [0, 1). Default 0.05.
	// Negative means zero.
	Deadband float64
	// Severity bands of the peak ratio, ascending. Default DefaultSeverity.
	Severity []SeverityBand
	// NoFreeze keeps the unit learning while an alert is active. By default
	// learning is frozen from activation until the incident ends.
	NoFreeze bool
	// SingleIncident keeps one model incident per unit (no incidents per
	// location, location.go). FreezeWhole freezes the unit's learning
	// while its model alarm is in alarm even when the Learning can mask
	// channels (hold.go). Both restore the behaviour before incidents per
	// location, for comparison.
	SingleIncident, FreezeWhole bool
	// LocationQuiet: an incident whose location has no channel over its own
	// limit this long, while the unit stays in alarm for others, ends.
	// Default DefaultLocationQuiet.
	LocationQuiet time.Duration
	// ReopenWithin: a model incident that returned to normal re-opens,
	// instead of a new one, when the unit goes into alarm again within
	// this time on a frame that names no place of its own (reopen.go).
	// Default DefaultReopenWithin; negative: never.
	ReopenWithin time.Duration
	// SpecificShare: a frame points at a place of its own (may open a new
	// location) only when its first leading channel explains at least
	// this share of the index (reopen.go). Default DefaultSpecificShare;
	// negative: every frame with a leading channel does.
	SpecificShare float64
	// AcceptAfter is the bounded hold: an incident flat this long is taken
	// as the new normal. Default DefaultAcceptAfter; negative: never.
	AcceptAfter time.Duration
	// RelearnSpan is the plant time the unit's model takes to take an
	// accepted incident's state in (the caller's recentring window and
	// the refresh that ends it, at its frame period, plus any score lag):
	// the bounded hold accepts an incident that much and the off-delay
	// before AcceptAfter, so that it has returned by then (holdbound.go).
	// Zero: a learner that takes the state in at once.
	RelearnSpan time.Duration
	// NoNewPoint turns off the new-operating-point rule (newpoint.go): a
	// model alarm of T² (and φ) alone, spread over many channels, with the
	// residual statistics within their limits, is then an incident like
	// any other. The zero value keeps the rule (DefaultNewPoint).
	NoNewPoint bool
	// NoPointByResidual turns off the reading of newpointres.go: where the
	// unit scores the residual Mahalanobis statistic (res), the
	// new-operating-point rule judges a break of the relations by it alone
	// and reads SPE and φ as it reads T², as measures of how far the unit
	// moved, when no channel explains SpecificShare of the index. With it
	// set, SPE is a break as any residual statistic. The zero value keeps
	// the reading (DefaultPointByResidual).
	NoPointByResidual bool
	// SpreadRestartsHold: a growth of an incident's location restarts its
	// bounded hold, as a growth of its level does (hold.go). The zero
	// value does not (DefaultSpreadRestartsHold).
	SpreadRestartsHold bool
	// FloodCount, FloodWindow, ChatterCount and ChatterWindow override the
	// engine-wide figures of Config for this unit; zero means those.
	FloodCount    int
	FloodWindow   time.Duration
	ChatterCount  int
	ChatterWindow time.Duration
}

// QualityRule is the alarm setting of one data-quality kind.
type QualityRule struct {
	// Hold: the condition must persist this long (frame time) before the
	// alarm goes active.
	Hold time.Duration
	// OffDelay: the condition must be absent this long before normal.
	OffDelay time.Duration
	// Severity of the alert (a name of the severity bands).
	Severity string
}

// DefaultQuality are the data-quality rules by kind. All figures are design
// choices: missing for more than 5 min, stuck as soon as the tracker says so,
// out of range or stale for 1 min; 1 min off-delay; a silent unit at once,
// closed by its first reading; spikes at once (the count over SpikeSpan is
// its own on-delay), 5 min off-delay; a level shift alike (the window of
// its mean is its own on-delay).
func DefaultQuality() map[string]QualityRule {
	return map[string]QualityRule{
		QualityStuck:      {Hold: 0, OffDelay: time.Minute, Severity: "low"},
		QualityOutOfRange: {Hold: time.Minute, OffDelay: time.Minute, Severity: "medium"},
		QualityStale:      {Hold: time.Minute, OffDelay: time.Minute, Severity: "low"},
		QualityMissing:    {Hold: 5 * time.Minute, OffDelay: time.Minute, Severity: "low"},
		QualitySilent:     {Hold: 0, OffDelay: 0, Severity: "medium"},
		QualityIntakeGap:  {Hold: 0, OffDelay: time.Minute, Severity: "medium"},
		QualitySpikes:     {Hold: 0, OffDelay: 5 * time.Minute, Severity: "low"},
		QualityLevelShift: {Hold: 0, OffDelay: 5 * time.Minute, Severity: "low"},
	}
}

// Config is the configuration of an Engine. The zero value means defaults.
type Config struct {
	// Rules apply to every unit without an entry in Units.
	Rules Rules
	// Units holds per-unit rules (complete; zero fields mean the defaults,
	// not Rules).
	Units map[string]Rules
	// Quality rules by kind; kinds left out take DefaultQuality.
	Quality map[string]QualityRule
	// FloodCount, FloodWindow, FloodEnd: a flood of a unit begins when more
	// than FloodCount new alerts fall within the trailing FloodWindow and
	// ends when that count drops below FloodEnd. Defaults 10, 10 min, 5.
	// Rules may override count and window per unit.
	FloodCount  int
	FloodWindow time.Duration
	FloodEnd    int
	// FloodUpdate is the least time between member-only revisions of a
	// flood record. Default 1 min.
	FloodUpdate time.Duration
	// MaxFloodMembers caps a flood record's member list. Default 200.
	MaxFloodMembers int
	// ChatterCount activations of one alarm within ChatterWindow make it
	// chattering. Defaults 3 and 60 s; Rules may override them per unit.
	ChatterCount  int
	ChatterWindow time.Duration
	// StaleAfter: an alert in alarm continuously for more than this is
	// flagged stale. Default 24 h.
	StaleAfter time.Duration
	// MaxShelve bounds shelve commands. Default 24 h.
	MaxShelve time.Duration
	// MaxContributors ranked channels go into a record. Default 5.
	MaxContributors int
	// OnEvent, if set, is called for every state change (under the engine's
	// lock: it must not call back into the Engine).
	OnEvent func(Event)
}

func (r Rules) withDefaults(c *Config) Rules {
	if r.FloodCount == 0 {
		r.FloodCount = c.FloodCount
	}
	if r.FloodWindow == 0 {
		r.FloodWindow = c.FloodWindow
	}
	if r.ChatterCount == 0 {
		r.ChatterCount = c.ChatterCount
	}
	if r.ChatterWindow == 0 {
		r.ChatterWindow = c.ChatterWindow
	}
	if r.OnCount == 0 && r.OnWindow == 0 {
		r.OnCount, r.OnWindow = DefaultOnCount, DefaultOnWindow
	}
	if r.OffDelay == 0 {
		r.OffDelay = DefaultOffDelay
	} else if r.OffDelay < 0 {
		r.OffDelay = 0
	}
	if r.Deadband == 0 {
		r.Deadband = DefaultDeadband
	} else if r.Deadband < 0 {
		r.Deadband = 0
	}
	if len(r.Severity) == 0 {
		r.Severity = DefaultSeverity()
	}
	if r.LocationQuiet <= 0 {
		r.LocationQuiet = DefaultLocationQuiet
	}
	if r.AcceptAfter == 0 {
		r.AcceptAfter = DefaultAcceptAfter
	}
	if r.ReopenWithin == 0 {
		r.ReopenWithin = DefaultReopenWithin
	}
	if r.SpecificShare == 0 {
		r.SpecificShare = DefaultSpecificShare
	} else if r.SpecificShare < 0 {
		r.SpecificShare = 0
	}
	return r
}

func (r Rules) validate(where string, floodEnd int) error {
	var errs []error
	if r.FloodCount < 1 || floodEnd > r.FloodCount+1 {
		errs = append(errs, fmt.Errorf("alerts: %s: flood count %d with end %d: need 1 ≤ end ≤ count+1", where, r.FloodCount, floodEnd))
	}
	if r.FloodWindow <= 0 || r.ChatterWindow <= 0 {
		errs = append(errs, fmt.Errorf("alerts: %s: flood and chatter windows must be positive", where))
	}
	if r.ChatterCount < 2 {
		errs = append(errs, fmt.Errorf("alerts: %s: chatter count %d: need ≥ 2", where, r.ChatterCount))
	}
	if r.OnCount < 1 || r.OnWindow < r.OnCount || r.OnWindow > 64 {
		errs = append(errs, fmt.Errorf("alerts: %s: on-delay %d of %d: need 1 ≤ n ≤ m ≤ 64", where, r.OnCount, r.OnWindow))
	}
	if r.OnHold < 0 {
		errs = append(errs, fmt.Errorf("alerts: %s: on-hold %v is negative", where, r.OnHold))
	}
	if r.RelearnSpan < 0 {
		errs = append(errs, fmt.Errorf("alerts: %s: relearn span %v is negative", where, r.RelearnSpan))
	}
	if !(r.SpecificShare >= 0 && r.SpecificShare <= 1) {
		errs = append(errs, fmt.Errorf("alerts: %s: specific share %v not in [0, 1]", where, r.SpecificShare))
	}
	if !(r.Deadband >= 0 && r.Deadband < 1) {
		errs = append(errs, fmt.Errorf("alerts: %s: deadband %v not in [0, 1)", where, r.Deadband))
	}
	prev := math.Inf(-1)
	for i, b := range r.Severity {
		if b.Name == "" {
			errs = append(errs, fmt.Errorf("alerts: %s: severity[%d]: empty name", where, i))
		}
		if !(b.Ratio > prev) || math.IsInf(b.Ratio, 0) {
			errs = append(errs, fmt.Errorf("alerts: %s: severity[%d] %q: ratio %v must be finite and ascending", where, i, b.Name, b.Ratio))
		}
		prev = b.Ratio
	}
	return errors.Join(errs...)
}

// withDefaults returns c with every zero field set to its default.
func (c Config) withDefaults() Config {
	q := DefaultQuality()
	for k, r := range c.Quality {
		q[k] = r
	}
	c.Quality = q
	def := func(p *int, v int) {
		if *p == 0 {
			*p = v
		}
	}
	defd := func(p *time.Duration, v time.Duration) {
		if *p == 0 {
			*p = v
		}
	}
	def(&c.FloodCount, DefaultFloodCount)
	defd(&c.FloodWindow, DefaultFloodWindow)
	def(&c.FloodEnd, DefaultFloodEnd)
	defd(&c.FloodUpdate, DefaultFloodUpdate)
	def(&c.MaxFloodMembers, DefaultMaxFloodMembers)
	def(&c.ChatterCount, DefaultChatterCount)
	defd(&c.ChatterWindow, DefaultChatterWindow)
	defd(&c.StaleAfter, DefaultStaleAfter)
	defd(&c.MaxShelve, DefaultMaxShelve)
	def(&c.MaxContributors, DefaultMaxContributors)
	c.Rules = c.Rules.withDefaults(&c)
	units := make(map[string]Rules, len(c.Units))
	for k, r := range c.Units {
		units[k] = r.withDefaults(&c)
	}
	c.Units = units
	return c
}

// Validate reports every problem of c (after defaults) at once.
func (c Config) Validate() error {
	c = c.withDefaults()
	var errs []error
	errs = append(errs, c.Rules.validate("rules", c.FloodEnd))
	for k, r := range c.Units {
		if k == "" {
			errs = append(errs, errors.New("alerts: units: empty unit name"))
		}
		errs = append(errs, r.validate("units["+k+"]", c.FloodEnd))
	}
	for k, q := range c.Quality {
		switch k {
		case QualityStuck, QualityOutOfRange, QualityStale, QualityMissing, QualitySilent, QualityIntakeGap, QualitySpikes, QualityLevelShift:
		default:
			errs = append(errs, fmt.Errorf("alerts: quality[%s]: unknown kind", k))
		}
		if q.Hold < 0 || q.OffDelay < 0 {
			errs = append(errs, fmt.Errorf("alerts: quality[%s]: negative hold or off-delay", k))
		}
		if q.Severity == "" {
			errs = append(errs, fmt.Errorf("alerts: quality[%s]: empty severity", k))
		}
	}
	if c.FloodEnd < 1 {
		errs = append(errs, fmt.Errorf("alerts: flood end %d: need ≥ 1", c.FloodEnd))
	}
	if c.FloodUpdate < 0 {
		errs = append(errs, errors.New("alerts: flood update interval is negative"))
	}
	if c.StaleAfter <= 0 || c.MaxShelve <= 0 {
		errs = append(errs, errors.New("alerts: stale-after and max-shelve must be positive"))
	}
	if c.MaxContributors < 0 || c.MaxFloodMembers < 0 {
		errs = append(errs, errors.New("alerts: max contributors/flood members must not be negative"))
	}
	return errors.Join(errs...)
}

// SignalPoint is a starting point for an absolute alarm on a process signal
// of one type: deadband in percent of the operating range and on-/off-delay.
type SignalPoint struct {
	DeadbandPct float64
	Delay       time.Duration
}

// SignalStartingPoints are the starting-point deadbands and delays by signal
// type of ISA-18.2-2009 §10 (moved towards TR18.2.3 in the 2016 edition).
// All four rows are from memory [from memory]; they are offered to
// configure channel alarms and are not used by the statistic alarms.
var SignalStartingPoints = map[string]SignalPoint{
	"flow":        {5, 15 * time.Second},
	"level":       {5, 60 * time.Second},
	"pressure":    {2, 15 * time.Second},
	"temperature": {1, 60 * time.Second},
}
