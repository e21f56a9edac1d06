package configs

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"modewatch/alerts"
	"modewatch/tracker"
)

// Setting describes one model or alarm setting that a configuration file,
// a command-line flag and a tune grid all accept. It is the one place that
// knows the setting's names, its default, how its text form is read and
// checked, and how it is written back into a configuration; the flags
// ([Settings] with Flag), the tune grid keys and its snippet writer all
// read this table.
//
// Text forms are those of the flags and grids: "l0:6", "auto:0.8", "7d",
// "0.01", "3/5", "true".
type Setting struct {
	// Name is the grid key and the YAML key inside Section ("halflife",
	// "on_delay"); the flag is the same with '-' for '_' ([Setting.Flag]).
	Name string
	// Section is the configuration section holding it: "model" or "alerts"
	// (also each unit's override of that section).
	Section string
	// Doc says what the setting does, for flag usage and docs.
	Doc string
	// Default is the default as text, read from the package that owns it;
	// empty when the owning package chooses it from the data (see Doc).
	Default string
	// Model reports whether the setting changes the model itself, so that
	// a fitted model file carries it.
	Model bool
	// Grid reports whether a tune grid may list it.
	Grid bool

	set  func(o *Overrides, s string) (string, error)
	yaml func(text string) string
}

// Overrides are model and alarm settings laid over a configuration: zero
// fields inherit.
type Overrides struct {
	Model  Model
	Alerts Alerts
}

// Path is the setting's key path in a configuration ("model.halflife").
func (s *Setting) Path() string { return s.Section + "." + s.Name }

// Flag is the setting's command-line flag name ("refresh-every").
func (s *Setting) Flag() string { return strings.ReplaceAll(s.Name, "_", "-") }

// Parse checks text and sets the setting's field in dst. It returns the
// text in normal form ("auto:0.80" → "auto:0.8", "72h" → "3d"); an error
// says what is wrong with the value, without a position.
func (s *Setting) Parse(dst *Overrides, text string) (string, error) {
	return s.set(dst, strings.TrimSpace(text))
}

// YAML returns a normal-form value as written after "Name:" in a
// configuration file.
func (s *Setting) YAML(text string) string {
	if s.yaml == nil {
		return text
	}
	return s.yaml(text)
}

// Apply lays o over the defaults and over every unit of c, as command-line
// flags and tune settings are: a unit's own override of a key o sets is
// replaced. A fixed mode count above max_modes raises max_modes to it.
func (o Overrides) Apply(c *Config) {
	m, a := o.Model, o.Alerts
	if m.Modes.Count > 0 {
		m.MaxModes = max(m.Modes.Count, c.Model.MaxModes)
	}
	c.Model = m.Over(c.Model)
	c.Alerts = a.Over(c.Alerts)
	for i := range c.Units {
		c.Units[i].Model = m.Over(c.Units[i].Model)
		c.Units[i].Alerts = a.Over(c.Units[i].Alerts)
	}
}

// Settings returns the table of settings, grid keys first in the order of
// the tune table's columns. The caller may not change it.
func Settings() []Setting { return settings }

// LookupSetting returns the setting named name (grid key or flag name), or
// nil.
func LookupSetting(name string) *Setting {
	name = strings.ReplaceAll(name, "-", "_")
	for i := range settings {
		if settings[i].Name == name {
			return &settings[i]
		}
	}
	return nil
}

// FormatDuration writes d as whole days ("7d") when it is a whole number
// of days, else as a Go duration ("90m0s" → "1h30m0s"); both forms are
// read back by [ParseDuration].
func FormatDuration(d time.Duration) string {
	const day = 24 * time.Hour
	if d > 0 && d%day == 0 {
		return strconv.FormatInt(int64(d/day), 10) + "d"
	}
	return d.String()
}

func quoted(text string) string { return strconv.Quote(text) }

// setDuration reads a duration above zero into the field of o that field
// returns.
func setDuration(field func(o *Overrides) *time.Duration) func(*Overrides, string) (string, error) {
	return func(o *Overrides, s string) (string, error) {
		d, err := ParseDuration(s)
		if err != nil {
			return s, err
		}
		if d <= 0 {
			return s, errors.New("a duration must be above zero")
		}
		*field(o) = d
		return FormatDuration(d), nil
	}
}

// setBool returns a setter of a true|false setting held in the field
// field returns (nil: unset).
func setBool(field func(o *Overrides) **bool) func(o *Overrides, s string) (string, error) {
	return func(o *Overrides, s string) (string, error) {
		b, err := strconv.ParseBool(s)
		if err != nil {
			return s, fmt.Errorf("%q: want true or false", s)
		}
		*field(o) = &b
		return strconv.FormatBool(b), nil
	}
}

// setFraction reads a number in (0, hi), what says what it is.
func setFraction(hi float64, what string, field func(o *Overrides) *float64) func(*Overrides, string) (string, error) {
	return func(o *Overrides, s string) (string, error) {
		f, err := strconv.ParseFloat(s, 64)
		if err != nil || !(f > 0 && f < hi) {
			return s, fmt.Errorf("%q is not %s in (0, %g)", s, what, hi)
		}
		*field(o) = f
		return strconv.FormatFloat(f, 'g', -1, 64), nil
	}
}

// setParsed reads a value of a type with a text form by parse into the
// field of o that field returns; the normal form is the value's String.
func setParsed[T fmt.Stringer](parse func(string) (T, error), field func(o *Overrides) *T) func(*Overrides, string) (string, error) {
	return func(o *Overrides, s string) (string, error) {
		v, err := parse(s)
		if err != nil {
			return s, err
		}
		*field(o) = v
		return v.String(), nil
	}
}

// setChecked stores the text, unchanged, in the field of o that field
// returns once check accepts it.
func setChecked(check func(string) error, field func(o *Overrides) *string) func(*Overrides, string) (string, error) {
	return func(o *Overrides, s string) (string, error) {
		if err := check(s); err != nil {
			return s, err
		}
		*field(o) = s
		return s, nil
	}
}

// setFrames reads a whole number of frames ≥ lo.
func setFrames(lo int, field func(o *Overrides) *int) func(*Overrides, string) (string, error) {
	return func(o *Overrides, s string) (string, error) {
		n, err := strconv.Atoi(s)
		if err != nil || n < lo {
			return s, fmt.Errorf("%q: want a whole number of frames ≥ %d", s, lo)
		}
		*field(o) = n
		return strconv.Itoa(n), nil
	}
}

// ParseOnDelay reads "N/M": over the limit in N of the last M frames,
// 1 ≤ N ≤ M ≤ 64.
func ParseOnDelay(s string) (OnDelay, error) {
	a, b, ok := strings.Cut(s, "/")
	n, err1 := strconv.Atoi(strings.TrimSpace(a))
	m, err2 := strconv.Atoi(strings.TrimSpace(b))
	if !ok || err1 != nil || err2 != nil || n < 1 || n > m || m > maxOnWindow {
		return OnDelay{}, fmt.Errorf("%q: want N/M, over the limit in N of the last M frames, 1 ≤ N ≤ M ≤ %d", s, maxOnWindow)
	}
	return OnDelay{N: n, M: m}, nil
}

// String is the "N/M" form.
func (o OnDelay) String() string { return fmt.Sprintf("%d/%d", o.N, o.M) }

// maxOnWindow bounds on_delay's M: the alarm engine's window.
const maxOnWindow = alerts.MaxOnWindow

var settings = []Setting{
	{
		Name: "sparsity", Section: "model", Model: true, Grid: true, Default: DefaultSparsity,
		Doc:  "sparsity of every mode: none|l0:K|l1:S|l0pen:G|l1pen:G|l1sqrt:G|logpen:G[,EPS]|exppen:G[,EPS]",
		set:  setChecked(CheckSparsity, func(o *Overrides) *string { return &o.Model.Sparsity }),
		yaml: quoted,
	},
	{
		Name: "modes", Section: "model", Model: true, Grid: true, Default: DefaultModes,
		Doc:  "number of modes: N or auto:SHARE",
		set:  setParsed(ParseModeCount, func(o *Overrides) *ModeCount { return &o.Model.Modes }),
		yaml: quoted,
	},
	{
		Name: "halflife", Section: "model", Model: true, Grid: true, Default: FormatDuration(DefaultHalfLife),
		Doc: "half-life of the exponential weights, e.g. 12h or 7d (fit: equal weights unless given)",
		set: setDuration(func(o *Overrides) *time.Duration { return &o.Model.HalfLife }),
	},
	{
		Name: "alpha", Section: "model", Model: true, Grid: true, Default: strconv.FormatFloat(tracker.DefaultAlpha, 'g', -1, 64),
		Doc: "false-alarm rate of each control limit per frame, in (0, 0.5)",
		set: setFraction(0.5, "a false-alarm rate", func(o *Overrides) *float64 { return &o.Model.Alpha }),
	},
	{
		Name: "warmup", Section: "model", Model: true, Grid: true, Default: strconv.Itoa(tracker.DefaultWarmUp),
		Doc: "frames learned before scores are reported (a unit of p channels wants at least 2p)",
		set: setFrames(2, func(o *Overrides) *int { return &o.Model.WarmUp }),
	},
	{
		Name: "refresh_every", Section: "model", Model: true, Grid: true, Default: strconv.Itoa(tracker.DefaultRefreshEvery),
		Doc: "frames learned between refreshes of the modes and limits",
		set: setFrames(1, func(o *Overrides) *int { return &o.Model.RefreshEvery }),
	},
	{
		Name: "on_delay", Section: "alerts", Grid: true, Default: OnDelay{N: alerts.DefaultOnCount, M: alerts.DefaultOnWindow}.String(),
		Doc: "N/M: an alarm goes active when over its limit in N of the last M frames",
		set: setParsed(ParseOnDelay, func(o *Overrides) *OnDelay { return &o.Alerts.OnDelay }),
		yaml: func(text string) string {
			od, _ := ParseOnDelay(text)
			return fmt.Sprintf("{n: %d, m: %d}", od.N, od.M)
		},
	},
	{
		Name: "on_span", Section: "alerts", Grid: true,
		Doc: "least plant time the on-delay window spans: at short frame periods M grows to cover it, and N in proportion; applies to the default on-delay, and to another when set (default: " + FormatDuration(alerts.DefaultOnSpan) + ")",
		set: setDuration(func(o *Overrides) *time.Duration { return &o.Alerts.OnSpan }),
	},
	{
		Name: "off_delay", Section: "alerts", Grid: true, Default: FormatDuration(alerts.DefaultOffDelay),
		Doc: "time back below the limit (minus the deadband) before an active alarm returns to normal",
		set: setDuration(func(o *Overrides) *time.Duration { return &o.Alerts.OffDelay }),
	},
	{
		Name: "deadband", Section: "alerts", Grid: true, Default: strconv.FormatFloat(alerts.DefaultDeadband, 'g', -1, 64),
		Doc: "fraction of the limit below it that a statistic must fall to count as back in, in (0, 1)",
		set: setFraction(1, "a fraction of the limit", func(o *Overrides) *float64 { return &o.Alerts.Deadband }),
	},
	{
		Name: "new_point", Section: "alerts", Grid: true, Default: strconv.FormatBool(alerts.DefaultNewPoint),
		Doc: "true|false: a model alarm of T² alone, spread over the unit's channels with SPE and the residual statistics within their limits, is recorded once as a new operating point and learned, not alerted",
		set: setBool(func(o *Overrides) **bool { return &o.Alerts.NewPoint }),
	},
	{
		Name: "new_point_res", Section: "alerts", Grid: true, Default: strconv.FormatBool(alerts.DefaultPointByResidual),
		Doc: "true|false: where a unit scores res, the new-operating-point rule judges a break of the relations by res alone: SPE and φ over their limits with T² and res within theirs and no channel explaining specific_share of the index are a move along relations the unit learned, recorded once and learned like a move in T²",
		set: setBool(func(o *Overrides) **bool { return &o.Alerts.NewPointRes }),
	},
	{
		Name: "spread_restarts_hold", Section: "alerts", Grid: true, Default: strconv.FormatBool(alerts.DefaultSpreadRestartsHold),
		Doc: "true|false: a growth of an incident's location (a channel outside it leading its frames) restarts its bounded hold (accept_after), as a growth of its statistics does",
		set: setBool(func(o *Overrides) **bool { return &o.Alerts.SpreadRestartsHold }),
	},
	{
		Name: "calibrate_points", Section: "alerts", Default: strconv.FormatBool(DefaultCalibratePoints),
		Doc: "true|false: fit's budget calibration does not count held-out excursions of T² alone, spread over the unit's channels, that the new-operating-point rule records as a notice",
		set: setBool(func(o *Overrides) **bool { return &o.Alerts.CalibratePoints }),
	},
	{
		Name: "level_shift", Section: "model", Grid: true, Default: strconv.FormatBool(DefaultLevelShift),
		Doc: "true|false: raise an alert on a channel whose residual given the others steps between two adjacent windows beyond 1.5 times the most its normal log showed",
		set: setBool(func(o *Overrides) **bool { return &o.Model.LevelShift }),
	},
	{
		Name: "level_window", Section: "model", Grid: true, Default: FormatDuration(DefaultLevelWindow),
		Doc: "plant time of each of the level-shift rule's two windows (at least two frames)",
		set: setDuration(func(o *Overrides) *time.Duration { return &o.Model.LevelWindow }),
	},
	{
		Name: "adapt", Section: "model", Grid: true, Default: "true",
		Doc: "true|false: keep learning while scoring",
		set: setBool(func(o *Overrides) **bool { return &o.Model.Adapt }),
	},
	{
		Name: "limits", Section: "model", Default: LimitsTheory,
		Doc:  "control limits: theory|empirical:FILE",
		set:  setParsed(ParseLimits, func(o *Overrides) *Limits { return &o.Model.Limits }),
		yaml: quoted,
	},
	{
		Name: "driver_level", Section: "model", Grid: true, Default: strconv.FormatFloat(tracker.DefaultDriverLevel, 'g', -1, 64),
		Doc: "significance level in (0, 0.5) of the test that keeps a context channel's slope (for the effective number of independent frames), or off: every slope kept",
		set: func(o *Overrides, s string) (string, error) {
			if s == "off" {
				o.Model.DriverLevel = -1
				return s, nil
			}
			return setFraction(0.5, "a significance level", func(o *Overrides) *float64 { return &o.Model.DriverLevel })(o, s)
		},
		yaml: func(text string) string {
			if text == "off" {
				return "-1"
			}
			return text
		},
	},
	{
		Name: "smoothing", Section: "model",
		Doc: "EWMA weight in (0, 1) of the alarm statistics before the alarm rule; its threshold comes from alerts.budget (default: none)",
		set: setFraction(1, "an EWMA weight", func(o *Overrides) *float64 { return &o.Model.Smoothing }),
	},
	{
		Name: "mewma_lambda", Section: "model", Default: strconv.FormatFloat(tracker.DefaultMewmaLambda, 'g', -1, 64),
		Doc: "EWMA weight in (0, 1) of the mewma statistic (statistics: mewma), a memory of about 1/λ frames",
		set: setFraction(1, "an EWMA weight", func(o *Overrides) *float64 { return &o.Model.MewmaLambda }),
	},
	{
		Name: "creep_lambda", Section: "model", Default: strconv.FormatFloat(tracker.DefaultCreepLambda, 'g', -1, 64),
		Doc: "EWMA weight in (0, 1) of the creep statistic (statistics: creep), a memory of about 1/λ frames",
		set: setFraction(1, "an EWMA weight", func(o *Overrides) *float64 { return &o.Model.CreepLambda }),
	},
	{
		Name: "state_scoring", Section: "model", Default: tracker.DefaultStateScoring,
		Doc: "found operating states (state: auto): posterior (every state's model, by the frame's posterior) or most_probable",
		set: setChecked(CheckStateScoring, func(o *Overrides) *string { return &o.Model.StateScoring }),
	},
	{
		Name: "statistics", Section: "model", Default: DefaultStatistics,
		Doc: "statistics that raise alarms, a list of t2,spe,phi,res,var,rel,mewma,creep",
		set: setChecked(func(s string) error { _, err := ParseStatistics(s); return err },
			func(o *Overrides) *string { return &o.Model.Statistics }),
		yaml: quoted,
	},
}

// CheckStateScoring checks a found-state scoring rule (model.state_scoring).
func CheckStateScoring(s string) error {
	switch s {
	case tracker.StateScoringPosterior, tracker.StateScoringMostProbable:
		return nil
	}
	return fmt.Errorf("%q: want %s or %s", s, tracker.StateScoringPosterior, tracker.StateScoringMostProbable)
}
