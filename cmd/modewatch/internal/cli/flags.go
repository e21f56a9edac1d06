package cli

import (
	"errors"
	"flag"
	"fmt"
	"os"
	"slices"
	"strings"
	"time"

	"modewatch/cmd/modewatch/internal/pipeline"
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

// modelFlags are the model and alarm settings every command accepts, one
// flag per configs.Settings entry (plus --config and --period); a flag that
// is given overrides the configuration for every unit.
type modelFlags struct {
	config string
	period string
	values map[string]*string // by setting name
	set    map[string]bool    // by flag name
}

func (m *modelFlags) register(fs *flag.FlagSet, withConfig bool) {
	if withConfig {
		fs.StringVar(&m.config, "config", "", "configuration `FILE` (YAML); without it, defaults and auto-discovery")
	}
	m.values = map[string]*string{}
	for _, st := range configs.Settings() {
		usage := st.Doc
		if st.Default != "" {
			usage += " (default " + st.Default + ")"
		}
		m.values[st.Name] = fs.String(st.Flag(), "", usage)
	}
	fs.StringVar(&m.period, "period", "", "frame period, e.g. 10s (default: from the configuration, else inferred from the data)")
}

// keptMessage says that setting k of the configuration does not apply to
// the units of the model file that it names.
func keptMessage(k pipeline.KeptSetting, file string) string {
	return fmt.Sprintf("model.%s %s in the configuration does not apply to unit(s) %s of the model file %s: they keep %s, the value they were fitted with (fit again to change it)",
		k.Name, k.Configured, strings.Join(k.Units, ", "), file, k.Fitted)
}

// fixedByModel returns the names of the settings given by flag (after
// load) that a fitted model file fixes for its units, in the settings'
// order.
func (m *modelFlags) fixedByModel() []string {
	var out []string
	for _, st := range configs.Settings() {
		if m.set[st.Flag()] && slices.Contains(pipeline.FixedSettings(), st.Name) {
			out = append(out, st.Name)
		}
	}
	return out
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
	var over configs.Overrides
	for _, st := range configs.Settings() {
		if !m.set[st.Flag()] {
			continue
		}
		if _, err := st.Parse(&over, *m.values[st.Name]); err != nil {
			bad(st.Flag(), err)
		}
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
	if len(errs) > 0 {
		return nil, usagef("%s", strings.Join(errs, "; "))
	}
	// Flags win over the configuration, for the defaults and every unit.
	over.Apply(c)
	if err := c.Validate(); err != nil {
		return nil, configError{err}
	}
	return c, nil
}

// HalfLifeSet reports whether --halflife was given.
func (m *modelFlags) halfLifeSet() bool { return m.set["halflife"] }
