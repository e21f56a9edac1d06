package cli

import (
	"errors"
	"flag"
	"fmt"
	"os"
	"strconv"
	"strings"
	"time"

	"modewatch/configs"
)

// parseAll parses flags and positional arguments in any order ("replay
// a.lp --json b.lp"); "--" ends the flags. It returns the positional
// arguments.
func parseAll(fs *flag.FlagSet, args []string) ([]string, error) {
	var pos []string
	for {
		if err := parse(fs, args); err != nil {
			return nil, err
		}
		rest := fs.Args()
		if len(rest) == 0 {
			return pos, nil
		}
		if len(args) > 0 && len(rest) < len(args) && args[len(args)-len(rest)-1] == "--" {
			return append(pos, rest...), nil
		}
		pos = append(pos, rest[0])
		args = rest[1:]
	}
}

// listFlag collects a repeatable string flag.
type listFlag []string

func (l *listFlag) String() string     { return strings.Join(*l, ",") }
func (l *listFlag) Set(s string) error { *l = append(*l, s); return nil }

// modelFlags are the model settings every command accepts; a flag that is
// given overrides the configuration for every unit.
type modelFlags struct {
	config   string
	sparsity string
	modes    string
	halflife string
	period   string
	alpha    string
	adapt    string
	limits   string
	stats    string
	smooth   string
	set      map[string]bool
}

func (m *modelFlags) register(fs *flag.FlagSet, withConfig bool) {
	if withConfig {
		fs.StringVar(&m.config, "config", "", "configuration `FILE` (YAML); without it, defaults and auto-discovery")
	}
	fs.StringVar(&m.sparsity, "sparsity", "", "sparsity of every mode: none|l0:K|l1:S|l0pen:G|l1pen:G|l1sqrt:G|logpen:G[,EPS]|exppen:G[,EPS] (default "+configs.DefaultSparsity+")")
	fs.StringVar(&m.modes, "modes", "", "number of modes: N or auto:SHARE (default "+configs.DefaultModes+")")
	fs.StringVar(&m.halflife, "halflife", "", "half-life of the exponential weights, e.g. 12h or 7d (default 7d; fit: equal weights)")
	fs.StringVar(&m.period, "period", "", "frame period, e.g. 10s (default: from the configuration, else inferred from the data)")
	fs.StringVar(&m.alpha, "alpha", "", "false-alarm rate of each control limit per frame, in (0, 0.5) (default 0.01)")
	fs.StringVar(&m.adapt, "adapt", "", "`true|false`: keep learning while scoring (default true)")
	fs.StringVar(&m.limits, "limits", "", "control limits: theory|empirical:FILE (default theory)")
	fs.StringVar(&m.smooth, "smoothing", "", "EWMA weight in (0, 1) of the alarm statistics before the alarm rule; its threshold comes from alerts.budget (default 0: none)")
	fs.StringVar(&m.stats, "statistics", "", "statistics that raise alarms, a list of t2,spe,phi,res,var,rel (default "+configs.DefaultStatistics+")")
}

// load reads the configuration (or starts from defaults), applies the
// flags over it and validates the result. Problems are configuration
// errors (exit status 2).
func (m *modelFlags) load(fs *flag.FlagSet) (*configs.Config, error) {
	m.set = map[string]bool{}
	fs.Visit(func(f *flag.Flag) { m.set[f.Name] = true })
	var c *configs.Config
	if m.config != "" {
		var err error
		c, err = configs.Load(m.config)
		if err != nil {
			if errors.Is(err, os.ErrNotExist) || !errors.Is(err, configs.ErrInvalid) {
				return nil, usagef("%v", err)
			}
			return nil, configError{err}
		}
	} else {
		c = &configs.Config{}
		c.ApplyDefaults()
	}
	var errs []string
	bad := func(flag string, err error) { errs = append(errs, fmt.Sprintf("--%s: %v", flag, err)) }
	var over configs.Model
	if m.set["sparsity"] {
		if err := configs.CheckSparsity(m.sparsity); err != nil {
			bad("sparsity", err)
		}
		over.Sparsity = m.sparsity
	}
	if m.set["smoothing"] {
		v, err := strconv.ParseFloat(m.smooth, 64)
		if err != nil || !(v > 0 && v < 1) {
			bad("smoothing", fmt.Errorf("%q is not an EWMA weight in (0, 1)", m.smooth))
		}
		over.Smoothing = v
	}
	if m.set["statistics"] {
		if _, err := configs.ParseStatistics(m.stats); err != nil {
			bad("statistics", err)
		}
		over.Statistics = m.stats
	}
	if m.set["modes"] {
		v, err := configs.ParseModeCount(m.modes)
		if err != nil {
			bad("modes", err)
		}
		over.Modes = v
		if v.Count > 0 {
			over.MaxModes = max(v.Count, c.Model.MaxModes)
		}
	}
	if m.set["halflife"] {
		d, err := configs.ParseDuration(m.halflife)
		if err == nil && d == 0 {
			err = errors.New("must be above zero")
		}
		if err != nil {
			bad("halflife", err)
		}
		over.HalfLife = d
	}
	if m.set["period"] {
		d, err := configs.ParseDuration(m.period)
		if err == nil && d < time.Millisecond {
			err = errors.New("must be at least 1ms")
		}
		if err != nil {
			bad("period", err)
		}
		c.Frames.Period = d
	}
	if m.set["alpha"] {
		a, err := strconv.ParseFloat(m.alpha, 64)
		if err != nil || !(a > 0 && a < 0.5) {
			bad("alpha", fmt.Errorf("%q is not a false-alarm rate in (0, 0.5)", m.alpha))
		}
		over.Alpha = a
	}
	if m.set["adapt"] {
		b, err := strconv.ParseBool(m.adapt)
		if err != nil {
			bad("adapt", fmt.Errorf("%q: want true or false", m.adapt))
		}
		over.Adapt = &b
	}
	if m.set["limits"] {
		l, err := configs.ParseLimits(m.limits)
		if err != nil {
			bad("limits", err)
		}
		over.Limits = l
	}
	if len(errs) > 0 {
		return nil, usagef("%s", strings.Join(errs, "; "))
	}
	// Flags win over the configuration, for the defaults and every unit.
	c.Model = over.Over(c.Model)
	for i := range c.Units {
		c.Units[i].Model = over.Over(c.Units[i].Model)
	}
	if err := c.Validate(); err != nil {
		return nil, configError{err}
	}
	return c, nil
}

// HalfLifeSet reports whether --halflife was given.
func (m *modelFlags) halfLifeSet() bool { return m.set["halflife"] }
