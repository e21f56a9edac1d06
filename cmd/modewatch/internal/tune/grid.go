// Package tune searches model and alarm settings against labelled
// episodes: it reads a grid file (lists of values per setting), expands it
// into every combination, ranks the results of replaying each one, marks
// the Pareto front, and writes the table as CSV and the best setting as a
// configuration snippet. Running the replays is the caller's job (package
// cli), so that a setting here is replayed exactly as "modewatch replay"
// would replay it.
//
// # Grid file
//
// A grid is YAML: a mapping from setting name to a list of values (a single
// value may stand alone). Every key is optional; a setting that is not
// listed keeps the value of the base configuration (--config and flags).
//
//	sparsity:  [none, "l0:4", "l0:6"]   # --sparsity syntax
//	modes:     [3, "auto:0.8"]          # N or auto:SHARE
//	halflife:  [1d, 3d, 7d]             # Go duration or whole days
//	alpha:     [0.01, 0.001]            # per-frame false-alarm rate, (0, 0.5)
//	warmup:    [500]                    # frames learned before scoring
//	refresh_every: [64]                 # frames between mode refreshes
//	on_delay:  ["3/5", "6/10"]          # N/M: over the limit in N of the last M frames
//	off_delay: [5m, 15m]                # time back below the limit before the alarm returns
//	deadband:  [0.05]                   # fraction of the limit, [0, 1)
//	adapt:     [true, false]            # keep learning while scoring
//
// The whole file is checked (unknown keys, bad values, duplicates, too many
// combinations) and every problem is reported with its line and column
// before any replay starts.
//
// # Reading the input once per setting
//
// Every setting is a complete replay that reads the input files again
// (package cli). Keeping the decoded frames in memory instead would cost
// frames × channels × 9 bytes (a month of 10 s frames over 500 channels:
// 1.2 GB), and frames fed from memory differ from a replay wherever the
// auto-discovered channel list grows during the log (a unit rebuilds its
// model when a channel appears in warm-up). Re-reading keeps memory
// bounded and the results identical, by construction, to separate
// replays. The price in time is measured in the package README.
package tune

import (
	"fmt"
	"os"
	"slices"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"modewatch/configs"
)

// MaxCombinations bounds the size of a grid: the product of the list
// lengths.
const MaxCombinations = 10000

// Keys of a grid file, in the order of the table columns: the settings of
// configs.Settings that a grid may list.
var Keys = gridKeys()

// ModelKeys are the grid keys that change the model itself. A fitted model
// (--model) carries its own, so a grid used with a fitted model may not
// list them.
var ModelKeys = modelKeys()

func gridKeys() []string {
	var keys []string
	for _, st := range configs.Settings() {
		if st.Grid {
			keys = append(keys, st.Name)
		}
	}
	return keys
}

func modelKeys() map[string]bool {
	m := map[string]bool{}
	for _, st := range configs.Settings() {
		if st.Grid && st.Model {
			m[st.Name] = true
		}
	}
	return m
}

// Grid is a parsed grid file: for every listed key, its values in file
// order (as written, normalised: "l0:4", "auto:0.8", "3d", "0.001", "6/10").
type Grid struct {
	File   string
	Axes   []Axis // in the order of Keys, only the keys present
	values map[string][]string
}

// Axis is one listed setting and its values, as text.
type Axis struct {
	Key    string
	Values []string
	Line   int // line of the key in the grid file
}

// ReadGrid reads and checks a grid file.
func ReadGrid(path string) (*Grid, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("tune: %w", err)
	}
	return ParseGrid(path, data)
}

// ParseGrid parses and checks a grid document; name is used in error
// positions. Every problem is reported at once as configs.Errors (which
// matches configs.ErrInvalid), each with line and column.
func ParseGrid(name string, data []byte) (*Grid, error) {
	g := &Grid{File: name, values: map[string][]string{}}
	var errs configs.Errors
	bad := func(n *yaml.Node, path, format string, args ...any) {
		e := &configs.Error{File: name, Path: path, Msg: fmt.Sprintf(format, args...)}
		if n != nil {
			e.Line, e.Column = n.Line, n.Column
		}
		errs = append(errs, e)
	}
	var doc yaml.Node
	if err := yaml.Unmarshal(data, &doc); err != nil {
		return nil, configs.Errors{configs.YAMLError(name, err)}
	}
	if len(doc.Content) == 0 {
		return nil, configs.Errors{{File: name, Msg: "the grid is empty: list at least one setting, e.g. alpha: [0.01, 0.001]"}}
	}
	root := doc.Content[0]
	if root.Kind != yaml.MappingNode {
		bad(root, "", "a grid is a mapping of setting names to lists of values")
		return nil, errs
	}
	seen := map[string]*yaml.Node{}
	for i := 0; i+1 < len(root.Content); i += 2 {
		k, v := root.Content[i], root.Content[i+1]
		key := k.Value
		if !known(key) {
			bad(k, key, "unknown setting; the grid knows %s", strings.Join(Keys, ", "))
			continue
		}
		if prev := seen[key]; prev != nil {
			bad(k, key, "listed twice (first at line %d)", prev.Line)
			continue
		}
		seen[key] = k
		items := []*yaml.Node{v}
		if v.Kind == yaml.SequenceNode {
			items = v.Content
			if len(items) == 0 {
				bad(v, key, "empty list: give at least one value or leave the setting out")
				continue
			}
		}
		var vals []string
		texts := map[string]int{}
		for j, it := range items {
			path := fmt.Sprintf("%s[%d]", key, j)
			if v.Kind != yaml.SequenceNode {
				path = key
			}
			if it.Kind != yaml.ScalarNode {
				bad(it, path, "want a single value, not a list or mapping")
				continue
			}
			text, err := configs.LookupSetting(key).Parse(&configs.Overrides{}, it.Value)
			if err != nil {
				bad(it, path, "%v", err)
				continue
			}
			if first, dup := texts[text]; dup {
				bad(it, path, "value %s repeats %s[%d]", text, key, first)
				continue
			}
			texts[text] = j
			vals = append(vals, text)
		}
		if len(vals) > 0 {
			g.values[key] = vals
		}
	}
	if len(errs) == 0 && len(g.values) == 0 {
		bad(root, "", "no setting listed: give at least one of %s", strings.Join(Keys, ", "))
	}
	n := 1
	for _, key := range Keys {
		vals, ok := g.values[key]
		if !ok {
			continue
		}
		ax := Axis{Key: key, Line: seen[key].Line, Values: vals}
		g.Axes = append(g.Axes, ax)
		n *= len(vals)
		if n > MaxCombinations {
			bad(root, "", "the grid has more than %d combinations; split it or list fewer values", MaxCombinations)
			break
		}
	}
	if len(errs) > 0 {
		return nil, errs
	}
	return g, nil
}

func known(key string) bool { return slices.Contains(Keys, key) }

// FormatDuration writes d as whole days ("7d") when it is a whole number
// of days, else as a Go duration; it is configs.FormatDuration.
func FormatDuration(d time.Duration) string { return configs.FormatDuration(d) }

// Size returns the number of combinations.
func (g *Grid) Size() int {
	n := 1
	for _, ax := range g.Axes {
		n *= len(ax.Values)
	}
	return n
}

// Has reports whether the grid lists key.
func (g *Grid) Has(key string) bool { _, ok := g.values[key]; return ok }

// Setting is one combination of the grid: an index into each axis.
type Setting struct {
	Index int      // position in grid order (the last axis varies fastest)
	Keys  []string // the grid's keys, in axis order
	Texts []string // the value of each key, as text (normal form)
}

// Settings expands the grid into every combination, in grid order: the
// first axis varies slowest, as in nested loops over the file's settings
// in the order of Keys.
func (g *Grid) Settings() []Setting {
	n := g.Size()
	out := make([]Setting, n)
	keys := make([]string, len(g.Axes))
	for a, ax := range g.Axes {
		keys[a] = ax.Key
	}
	for i := range out {
		s := Setting{Index: i, Keys: keys, Texts: make([]string, len(g.Axes))}
		rest := i
		for a := len(g.Axes) - 1; a >= 0; a-- {
			vals := g.values[g.Axes[a].Key]
			k := rest % len(vals)
			rest /= len(vals)
			s.Texts[a] = vals[k]
		}
		out[i] = s
	}
	return out
}

// String is the setting as "key=value key=value".
func (s Setting) String() string {
	parts := make([]string, len(s.Keys))
	for i, k := range s.Keys {
		parts[i] = k + "=" + s.Texts[i]
	}
	return strings.Join(parts, " ")
}

// Value returns the text of key in s, or "".
func (s Setting) Value(key string) string {
	for i, k := range s.Keys {
		if k == key {
			return s.Texts[i]
		}
	}
	return ""
}

// Overrides returns the model and alarm settings of s as overrides: fields
// the setting does not set are zero (inherit). Each value is read by its
// configs.Setting, as the configuration and the flags read it.
func (s Setting) Overrides() (configs.Model, configs.Alerts) {
	var o configs.Overrides
	for i, k := range s.Keys {
		// The texts were checked by ParseGrid.
		if _, err := configs.LookupSetting(k).Parse(&o, s.Texts[i]); err != nil {
			panic(fmt.Sprintf("tune: grid value %s=%s: %v", k, s.Texts[i], err))
		}
	}
	return o.Model, o.Alerts
}

// Apply returns a copy of base with s laid over the defaults and over
// every unit, as command-line flags are: a unit's own override of a key the
// grid lists is replaced by the grid's value. base is not changed.
func (s Setting) Apply(base *configs.Config) *configs.Config {
	c := *base
	c.Units = append([]configs.Unit(nil), base.Units...)
	m, a := s.Overrides()
	configs.Overrides{Model: m, Alerts: a}.Apply(&c)
	return &c
}
