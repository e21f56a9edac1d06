package sim

import (
	"fmt"
	"math"
	"os"
	"regexp"
	"sort"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"modewatch/configs"
)

// FieldError is one problem in a scenario file, with its position and the
// path of the offending key (Path, e.g.
// units[0].assets[1].channels[2].noise): the configuration's error type,
// shared by every YAML reader of the project.
type FieldError = configs.Error

// LoadError collects every problem found in a scenario file.
type LoadError struct {
	File string
	Errs []*FieldError
}

func (e *LoadError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "sim: %s: %d problem(s) in scenario", e.File, len(e.Errs))
	for _, fe := range e.Errs {
		b.WriteString("\n  ")
		b.WriteString(fe.Error())
	}
	return b.String()
}

// Unwrap returns the individual problems, for errors.As.
func (e *LoadError) Unwrap() []error {
	out := make([]error, len(e.Errs))
	for i, fe := range e.Errs {
		out[i] = fe
	}
	return out
}

// Load reads and validates a scenario file. Every problem is reported at
// once, each with file:line:column (see LoadError).
func Load(path string) (*Scenario, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("sim: %w", err)
	}
	return LoadBytes(path, b)
}

// LoadBytes parses a scenario held in memory; name is used in messages.
//
// The format (all keys lower case; durations are Go durations such as "90s",
// "6h", or days such as "3d"; times are RFC 3339):
//
//	name: text                      # free text
//	seed: 42                        # unsigned integer
//	start: 2026-03-02T00:00:00Z     # first sample
//	duration: 3d
//	split: 2d                       # optional: normal part before, test part after (normal.lp, test.lp)
//	period: 20s
//	jitter: 250ms                   # optional, < period/2
//	dropout: 0.0005                 # optional, probability per value
//	drivers:                        # global latent drivers
//	  - name: heat_load
//	    mean: 0.65
//	    daily: {amplitude: 0.12, peak: 14h}    # optional
//	    walk: {sigma: 0.03, tau: 6h}           # optional
//	    steps: {levels: [-0.1, 0, 0.1], hold: 8h}   # optional
//	    trend: {per_day: 0.4, reset: 5d}       # optional slow change; reset: back to 0 (sawtooth)
//	    moves: [{at: 9d, by: 2, over: 30m}]    # optional planned changes (setpoint, grade)
//	units:
//	  - name: coolwater             # line-protocol measurement
//	    assets:
//	      - name: pump              # asset tag value
//	        count: 2                # optional: pump01, pump02 (copies)
//	        drivers: [...]          # optional asset-local drivers, one per copy
//	        channels:
//	          - name: flow          # field
//	            eng_unit: m3/h
//	            base: 420
//	            noise: 3            # σ of white noise
//	            decimals: 1         # optional, default 3
//	            min: 0              # optional clamp
//	            max: 900            # optional clamp
//	            wander: {sigma: 2, tau: 4h}   # optional own slow variation
//	            quantum: 0.5        # optional: round to multiples of it
//	            gate: pump_run      # optional: at rest while this driver's value is ≤ 0
//	            rest: 0             # optional: the exact reading at rest (default 0)
//	            terms: {speed: 0.9, heat_load^2: -20, heat_load*ambient: 0.5}
//	faults:
//	  - id: F1
//	    kind: bias                  # bias drift stuck noise spikes dropout relation effect outage
//	    start: 28h                  # offset from start, or RFC 3339
//	    end: 34h
//	    channels: [coolwater.pump01.flow]
//	    size: -8                    # bias, drift, spikes, relation
//	    factor: 3                   # noise, effect
//	    rate: 4                     # spikes per hour
//	    driver: speed               # relation, effect
//	    ramp: 1h                    # relation, optional
//	  - {id: F2, kind: outage, unit: coolwater, start: 40h, end: 40h30m}  # every channel of the unit silent
//
// Term keys name a driver (linear), driver^2 (square) or a*b (product);
// names resolve first to the asset's own drivers, then to global ones.
func LoadBytes(name string, data []byte) (*Scenario, error) {
	var root yaml.Node
	if err := yaml.Unmarshal(data, &root); err != nil {
		return nil, fmt.Errorf("sim: %s: %w", name, err)
	}
	l := &loader{file: name}
	s := l.scenario(&root)
	if len(l.errs) > 0 {
		sort.SliceStable(l.errs, func(i, j int) bool {
			a, b := l.errs[i], l.errs[j]
			return a.Line < b.Line || (a.Line == b.Line && a.Column < b.Column)
		})
		return nil, &LoadError{File: name, Errs: l.errs}
	}
	if err := s.check(); err != nil {
		return nil, fmt.Errorf("sim: %s: %w", name, err)
	}
	return s, nil
}

var nameRE = regexp.MustCompile(`^[a-z][a-z0-9_]*$`)

type loader struct {
	file  string
	start time.Time // the scenario's start, for times given as offsets
	errs  []*FieldError
	total int // channels expanded so far
}

// maxChannels bounds the expanded scenario so a small file cannot ask for
// unbounded memory (counts multiply).
const maxChannels = 200000

func (l *loader) errf(n *yaml.Node, path, format string, args ...any) {
	line, col := 0, 0
	if n != nil {
		line, col = n.Line, n.Column
	}
	l.errs = append(l.errs, &FieldError{File: l.file, Line: line, Column: col, Path: path, Msg: fmt.Sprintf(format, args...)})
}

// fields checks that n is a mapping with only the allowed keys, no
// duplicates and every required key, and returns key → value node.
func (l *loader) fields(n *yaml.Node, path string, allowed, required []string) map[string]*yaml.Node {
	n = deref(n)
	out := map[string]*yaml.Node{}
	if n.Kind != yaml.MappingNode {
		l.errf(n, path, "expected a mapping")
		return out
	}
	keys := map[string]*yaml.Node{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], n.Content[i+1]
		kp := join(path, k.Value)
		if prev, dup := keys[k.Value]; dup {
			l.errf(k, kp, "duplicate key (first at line %d)", prev.Line)
			continue
		}
		keys[k.Value] = k
		ok := false
		for _, a := range allowed {
			if a == k.Value {
				ok = true
				break
			}
		}
		if !ok {
			l.errf(k, kp, "unknown key (allowed: %s)", strings.Join(allowed, ", "))
			continue
		}
		out[k.Value] = deref(v)
	}
	for _, r := range required {
		if _, ok := out[r]; !ok {
			if _, seen := keys[r]; !seen {
				l.errf(n, join(path, r), "missing")
			}
		}
	}
	return out
}

// deref follows YAML aliases (*name) to their anchored node, so anchors can
// share channel lists between assets.
func deref(n *yaml.Node) *yaml.Node {
	for i := 0; n != nil && n.Kind == yaml.AliasNode && n.Alias != nil && i < 100; i++ {
		n = n.Alias
	}
	return n
}

func join(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}

func (l *loader) scalar(n *yaml.Node, path string) (string, bool) {
	n = deref(n)
	if n.Kind != yaml.ScalarNode {
		l.errf(n, path, "expected a single value")
		return "", false
	}
	return n.Value, true
}

func (l *loader) name(n *yaml.Node, path string) string {
	s, ok := l.scalar(n, path)
	if ok && !nameRE.MatchString(s) {
		l.errf(n, path, "%q is not a valid name (lower-case letter, then lower-case letters, digits or _)", s)
	}
	return s
}

func (l *loader) float(n *yaml.Node, path string) float64 {
	s, ok := l.scalar(n, path)
	if !ok {
		return 0
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		l.errf(n, path, "%q is not a finite number", s)
		return 0
	}
	return v
}

func (l *loader) nonneg(n *yaml.Node, path string) float64 {
	v := l.float(n, path)
	if v < 0 {
		l.errf(n, path, "must be ≥ 0")
	}
	return v
}

func (l *loader) floats(n *yaml.Node, path string) []float64 {
	return list(l, n, path, "expected a list of numbers", l.float)
}

func (l *loader) strs(n *yaml.Node, path string) []string {
	return list(l, n, path, "expected a list", func(c *yaml.Node, p string) string {
		v, _ := l.scalar(c, p)
		return v
	})
}

// list reads the YAML list n with one, which gets each element and its
// path ("path[i]"); a node that is not a list is the error want.
func list[T any](l *loader, n *yaml.Node, path, want string, one func(*yaml.Node, string) T) []T {
	n = deref(n)
	if n.Kind != yaml.SequenceNode {
		l.errf(n, path, "%s", want)
		return nil
	}
	out := make([]T, len(n.Content))
	for i, c := range n.Content {
		out[i] = one(c, fmt.Sprintf("%s[%d]", path, i))
	}
	return out
}

// parseDuration accepts Go durations, a number of days ("3d", "0.5d") and
// days followed by a Go duration ("7d6h", "10d2h30m").
func parseDuration(s string) (time.Duration, error) {
	if days, rest, ok := strings.Cut(s, "d"); ok && rest != "" {
		d, err := parseDuration(days + "d")
		if err != nil {
			return 0, fmt.Errorf("%q is not a duration", s)
		}
		r, err := time.ParseDuration(rest)
		if err != nil || r < 0 {
			return 0, fmt.Errorf("%q is not a duration (e.g. 20s, 6h, 3d, 7d6h)", s)
		}
		return d + r, nil
	}
	if d, ok := strings.CutSuffix(s, "d"); ok {
		v, err := strconv.ParseFloat(d, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || math.Abs(v) > 100000 {
			return 0, fmt.Errorf("%q is not a duration", s)
		}
		return time.Duration(v * float64(24*time.Hour)), nil
	}
	d, err := time.ParseDuration(s)
	if err != nil {
		return 0, fmt.Errorf("%q is not a duration (e.g. 20s, 6h, 3d)", s)
	}
	return d, nil
}

func (l *loader) duration(n *yaml.Node, path string) time.Duration {
	s, ok := l.scalar(n, path)
	if !ok {
		return 0
	}
	d, err := parseDuration(s)
	if err != nil {
		l.errf(n, path, "%v", err)
		return 0
	}
	if d < 0 {
		l.errf(n, path, "must not be negative")
	}
	return d
}

func (l *loader) scenario(root *yaml.Node) *Scenario {
	s := &Scenario{file: l.file, Dropout: 0}
	if root.Kind != yaml.DocumentNode || len(root.Content) == 0 {
		l.errf(root, "", "empty scenario")
		return s
	}
	doc := root.Content[0]
	f := l.fields(doc, "", []string{"name", "seed", "start", "duration", "split", "period", "jitter", "dropout", "drivers", "units", "faults"},
		[]string{"seed", "start", "duration", "period", "units"})
	if n := f["name"]; n != nil {
		s.Name, _ = l.scalar(n, "name")
	}
	if n := f["seed"]; n != nil {
		if v, ok := l.scalar(n, "seed"); ok {
			seed, err := strconv.ParseUint(v, 0, 64)
			if err != nil {
				l.errf(n, "seed", "%q is not an unsigned integer", v)
			}
			s.Seed = seed
		}
	}
	if n := f["start"]; n != nil {
		if v, ok := l.scalar(n, "start"); ok {
			t, err := time.Parse(time.RFC3339Nano, v)
			if err != nil {
				l.errf(n, "start", "%q is not an RFC 3339 time", v)
			}
			s.Start = t.UTC()
			l.start = s.Start
		}
	}
	if n := f["duration"]; n != nil {
		s.Duration = l.duration(n, "duration")
		if s.Duration == 0 {
			l.errf(n, "duration", "must be > 0")
		}
	}
	if n := f["split"]; n != nil {
		s.Split = l.when(s, n, "split")
		if !s.Split.IsZero() && s.Duration > 0 && (!s.Split.After(s.Start) || !s.Split.Before(s.End())) {
			l.errf(n, "split", "must lie after start and before start + duration")
		}
	}
	if n := f["period"]; n != nil {
		s.Period = l.duration(n, "period")
		if s.Period < time.Millisecond {
			l.errf(n, "period", "must be ≥ 1ms")
		}
	}
	if n := f["jitter"]; n != nil {
		s.Jitter = l.duration(n, "jitter")
		if s.Period > 0 && 2*s.Jitter >= s.Period {
			l.errf(n, "jitter", "must be less than half the period")
		}
	}
	if n := f["dropout"]; n != nil {
		s.Dropout = l.float(n, "dropout")
		if s.Dropout < 0 || s.Dropout >= 1 {
			l.errf(n, "dropout", "must be in [0, 1)")
		}
	}
	global := map[string]int{}
	if n := f["drivers"]; n != nil {
		if n.Kind != yaml.SequenceNode {
			l.errf(n, "drivers", "expected a list")
		} else {
			for i, dn := range n.Content {
				p := fmt.Sprintf("drivers[%d]", i)
				d, nameNode := l.driver(dn, p)
				if _, dup := global[d.Name]; dup && d.Name != "" {
					l.errf(nameNode, p+".name", "driver %q defined twice", d.Name)
					continue
				}
				global[d.Name] = len(s.Drivers)
				s.Drivers = append(s.Drivers, d)
			}
		}
	}
	channels := map[string]bool{}
	if n := f["units"]; n != nil {
		if n.Kind != yaml.SequenceNode || len(n.Content) == 0 {
			l.errf(n, "units", "expected a non-empty list")
		} else {
			seen := map[string]bool{}
			for i, un := range n.Content {
				u := l.unit(s, un, fmt.Sprintf("units[%d]", i), global, channels)
				if seen[u.Name] {
					l.errf(un, fmt.Sprintf("units[%d].name", i), "unit %q defined twice", u.Name)
				}
				seen[u.Name] = true
				s.Units = append(s.Units, u)
			}
		}
	}
	if n := f["faults"]; n != nil {
		if n.Kind != yaml.SequenceNode {
			l.errf(n, "faults", "expected a list")
		} else {
			ids := map[string]bool{}
			for i, en := range n.Content {
				p := fmt.Sprintf("faults[%d]", i)
				e := l.episode(s, en, p, channels)
				if ids[e.ID] && e.ID != "" {
					l.errf(en, p+".id", "fault id %q used twice", e.ID)
				}
				ids[e.ID] = true
				s.Episodes = append(s.Episodes, e)
			}
		}
	}
	return s
}

// driver parses one driver; it returns the name node for later messages.
func (l *loader) driver(n *yaml.Node, path string) (Driver, *yaml.Node) {
	var d Driver
	f := l.fields(n, path, []string{"name", "mean", "daily", "walk", "steps", "trend", "moves"}, []string{"name"})
	if v := f["name"]; v != nil {
		d.Name = l.name(v, path+".name")
	}
	if v := f["mean"]; v != nil {
		d.Mean = l.float(v, path+".mean")
	}
	if v := f["daily"]; v != nil {
		p := path + ".daily"
		g := l.fields(v, p, []string{"amplitude", "peak"}, []string{"amplitude", "peak"})
		if a := g["amplitude"]; a != nil {
			d.Daily.Amplitude = l.nonneg(a, p+".amplitude")
		}
		if a := g["peak"]; a != nil {
			d.Daily.Peak = l.duration(a, p+".peak")
			if d.Daily.Peak >= 24*time.Hour {
				l.errf(a, p+".peak", "must be a time of day below 24h")
			}
		}
	}
	if v := f["walk"]; v != nil {
		d.Walk = l.walk(v, path+".walk")
	}
	if v := f["steps"]; v != nil {
		p := path + ".steps"
		g := l.fields(v, p, []string{"levels", "hold"}, []string{"levels", "hold"})
		if a := g["levels"]; a != nil {
			d.Steps.Levels = l.floats(a, p+".levels")
			if a.Kind == yaml.SequenceNode && len(d.Steps.Levels) == 0 {
				l.errf(a, p+".levels", "needs at least one level")
			}
		}
		if a := g["hold"]; a != nil {
			d.Steps.Hold = l.duration(a, p+".hold")
			if d.Steps.Hold == 0 {
				l.errf(a, p+".hold", "must be > 0")
			}
		}
	}
	if v := f["trend"]; v != nil {
		p := path + ".trend"
		g := l.fields(v, p, []string{"per_day", "reset"}, []string{"per_day"})
		if a := g["per_day"]; a != nil {
			d.Trend.PerDay = l.float(a, p+".per_day")
		}
		if a := g["reset"]; a != nil {
			d.Trend.Reset = l.duration(a, p+".reset")
		}
	}
	if v := f["moves"]; v != nil {
		if v.Kind != yaml.SequenceNode {
			l.errf(v, path+".moves", "expected a list")
		} else {
			for i, mn := range v.Content {
				p := fmt.Sprintf("%s.moves[%d]", path, i)
				g := l.fields(mn, p, []string{"at", "by", "over"}, []string{"at", "by"})
				var m Move
				if a := g["at"]; a != nil {
					m.At = l.whenFrom(l.start, a, p+".at")
				}
				if a := g["by"]; a != nil {
					m.By = l.float(a, p+".by")
				}
				if a := g["over"]; a != nil {
					m.Over = l.duration(a, p+".over")
				}
				if k := len(d.Moves); k > 0 && m.At.Before(d.Moves[k-1].At) {
					l.errf(mn, p+".at", "moves must be in time order")
				}
				d.Moves = append(d.Moves, m)
			}
		}
	}
	return d, f["name"]
}

func (l *loader) walk(n *yaml.Node, p string) Walk {
	var w Walk
	g := l.fields(n, p, []string{"sigma", "tau"}, []string{"sigma", "tau"})
	if a := g["sigma"]; a != nil {
		w.Sigma = l.nonneg(a, p+".sigma")
	}
	if a := g["tau"]; a != nil {
		w.Tau = l.duration(a, p+".tau")
		if w.Tau == 0 {
			l.errf(a, p+".tau", "must be > 0")
		}
	}
	return w
}

func (l *loader) unit(s *Scenario, n *yaml.Node, path string, global map[string]int, channels map[string]bool) Unit {
	var u Unit
	f := l.fields(n, path, []string{"name", "assets"}, []string{"name", "assets"})
	if v := f["name"]; v != nil {
		u.Name = l.name(v, path+".name")
	}
	v := f["assets"]
	if v == nil {
		return u
	}
	if v.Kind != yaml.SequenceNode || len(v.Content) == 0 {
		l.errf(v, path+".assets", "expected a non-empty list")
		return u
	}
	seen := map[string]bool{}
	for i, an := range v.Content {
		ap := fmt.Sprintf("%s.assets[%d]", path, i)
		for _, a := range l.assets(s, u.Name, an, ap, global, channels) {
			if seen[a.Name] {
				l.errf(an, ap+".name", "asset %q defined twice in unit %q", a.Name, u.Name)
			}
			seen[a.Name] = true
			u.Assets = append(u.Assets, a)
		}
	}
	return u
}

// assets parses one asset entry, expanding count copies with their local drivers.
func (l *loader) assets(s *Scenario, unit string, n *yaml.Node, path string, global map[string]int, channels map[string]bool) []Asset {
	f := l.fields(n, path, []string{"name", "count", "drivers", "channels"}, []string{"name", "channels"})
	var base string
	if v := f["name"]; v != nil {
		base = l.name(v, path+".name")
	}
	count, numbered := 1, false
	if v := f["count"]; v != nil {
		if sv, ok := l.scalar(v, path+".count"); ok {
			c, err := strconv.Atoi(sv)
			if err != nil || c < 1 || c > 100000 {
				l.errf(v, path+".count", "%q is not a count in [1, 100000]", sv)
			} else {
				count, numbered = c, true
			}
		}
	}
	var local []Driver
	if v := f["drivers"]; v != nil {
		if v.Kind != yaml.SequenceNode {
			l.errf(v, path+".drivers", "expected a list")
		} else {
			seen := map[string]bool{}
			for i, dn := range v.Content {
				p := fmt.Sprintf("%s.drivers[%d]", path, i)
				d, nn := l.driver(dn, p)
				if seen[d.Name] {
					l.errf(nn, p+".name", "driver %q defined twice in this asset", d.Name)
				}
				seen[d.Name] = true
				local = append(local, d)
			}
		}
	}
	width := len(strconv.Itoa(count))
	if width < 2 {
		width = 2
	}
	if nc := f["channels"]; nc != nil && nc.Kind == yaml.SequenceNode {
		if l.total += count * len(nc.Content); l.total > maxChannels {
			l.errf(n, path, "scenario would have more than %d channels", maxChannels)
			return nil
		}
	}
	var out []Asset
	for c := 1; c <= count; c++ {
		a := Asset{Name: base}
		if numbered {
			a.Name = fmt.Sprintf("%s%0*d", base, width, c)
		}
		scope := map[string]int{}
		for _, d := range local {
			d.Name = unit + "." + a.Name + "." + d.Name
			d.Steps.Levels = append([]float64(nil), d.Steps.Levels...)
			scope[d.Name[len(unit)+len(a.Name)+2:]] = len(s.Drivers)
			s.Drivers = append(s.Drivers, d)
		}
		report := c == 1 // report channel problems once, not per copy
		cv := f["channels"]
		if cv == nil {
			continue
		}
		if cv.Kind != yaml.SequenceNode || len(cv.Content) == 0 {
			if report {
				l.errf(cv, path+".channels", "expected a non-empty list")
			}
			continue
		}
		fields := map[string]bool{}
		for i, cn := range cv.Content {
			cp := fmt.Sprintf("%s.channels[%d]", path, i)
			var ch Channel
			if report {
				ch = l.channel(cn, cp, scope, global)
			} else {
				sub := &loader{file: l.file}
				ch = sub.channel(cn, cp, scope, global)
			}
			if fields[ch.Field] && report {
				l.errf(cn, cp+".name", "channel %q defined twice in asset %q", ch.Field, base)
			}
			fields[ch.Field] = true
			channels[unit+"."+a.Name+"."+ch.Field] = true
			a.Channels = append(a.Channels, ch)
		}
		out = append(out, a)
	}
	return out
}

func (l *loader) channel(n *yaml.Node, path string, scope, global map[string]int) Channel {
	ch := Channel{Decimals: 3, Min: 1, Max: -1}
	f := l.fields(n, path, []string{"name", "eng_unit", "base", "noise", "decimals", "min", "max", "wander", "terms", "quantum", "gate", "rest"},
		[]string{"name", "eng_unit", "base", "noise"})
	if v := f["name"]; v != nil {
		ch.Field = l.name(v, path+".name")
	}
	if v := f["eng_unit"]; v != nil {
		ch.EngUnit, _ = l.scalar(v, path+".eng_unit")
	}
	if v := f["base"]; v != nil {
		ch.Base = l.float(v, path+".base")
	}
	if v := f["noise"]; v != nil {
		ch.Noise = l.nonneg(v, path+".noise")
	}
	if v := f["decimals"]; v != nil {
		if sv, ok := l.scalar(v, path+".decimals"); ok {
			d, err := strconv.Atoi(sv)
			if err != nil || d < 0 || d > 9 {
				l.errf(v, path+".decimals", "%q is not an integer in [0, 9]", sv)
			}
			ch.Decimals = d
		}
	}
	lo, hi := f["min"], f["max"]
	if lo != nil || hi != nil {
		ch.Min, ch.Max = math.Inf(-1), math.Inf(1)
		if lo != nil {
			ch.Min = l.float(lo, path+".min")
		}
		if hi != nil {
			ch.Max = l.float(hi, path+".max")
		}
		if ch.Min >= ch.Max {
			l.errf(n, path, "min must be below max")
		}
	}
	if v := f["wander"]; v != nil {
		ch.Wander = l.walk(v, path+".wander")
	}
	if v := f["quantum"]; v != nil {
		ch.Quantum = l.nonneg(v, path+".quantum")
	}
	if v := f["gate"]; v != nil {
		if name, ok := l.scalar(v, path+".gate"); ok {
			i, err := resolve(name, scope, global)
			if err != nil {
				l.errf(v, path+".gate", "%v", err)
			}
			ch.Gate.On, ch.Gate.Driver = err == nil, i
		}
	}
	if v := f["rest"]; v != nil {
		ch.Gate.Rest = l.float(v, path+".rest")
		if f["gate"] == nil {
			l.errf(v, path+".rest", "needs a gate (the driver that starts and stops the machine)")
		}
	}
	if v := f["terms"]; v != nil {
		p := path + ".terms"
		if v.Kind != yaml.MappingNode {
			l.errf(v, p, "expected a mapping of term → gain, e.g. {load: 2, load^2: -1, load*ambient: 0.5}")
			return ch
		}
		seen := map[string]bool{}
		for i := 0; i+1 < len(v.Content); i += 2 {
			k, g := v.Content[i], v.Content[i+1]
			kp := p + "." + k.Value
			if seen[k.Value] {
				l.errf(k, kp, "duplicate term")
				continue
			}
			seen[k.Value] = true
			t, err := parseTerm(k.Value, scope, global)
			if err != nil {
				l.errf(k, kp, "%v", err)
				continue
			}
			t.Gain = l.float(g, kp)
			ch.Terms = append(ch.Terms, t)
		}
	}
	return ch
}

func resolve(name string, scope, global map[string]int) (int, error) {
	if i, ok := scope[name]; ok {
		return i, nil
	}
	if i, ok := global[name]; ok {
		return i, nil
	}
	return 0, fmt.Errorf("unknown driver %q", name)
}

// parseTerm parses "a", "a^2" or "a*b".
func parseTerm(s string, scope, global map[string]int) (Term, error) {
	s = strings.ReplaceAll(s, " ", "")
	if a, ok := strings.CutSuffix(s, "^2"); ok {
		i, err := resolve(a, scope, global)
		return Term{Kind: Square, A: i}, err
	}
	if a, b, ok := strings.Cut(s, "*"); ok {
		i, err := resolve(a, scope, global)
		if err != nil {
			return Term{}, err
		}
		j, err := resolve(b, scope, global)
		return Term{Kind: Product, A: i, B: j}, err
	}
	i, err := resolve(s, scope, global)
	return Term{Kind: Linear, A: i}, err
}

func (l *loader) when(s *Scenario, n *yaml.Node, path string) time.Time {
	return l.whenFrom(s.Start, n, path)
}

// whenFrom parses an RFC 3339 time or an offset from start.
func (l *loader) whenFrom(start time.Time, n *yaml.Node, path string) time.Time {
	v, ok := l.scalar(n, path)
	if !ok {
		return time.Time{}
	}
	if t, err := time.Parse(time.RFC3339Nano, v); err == nil {
		return t.UTC()
	}
	d, err := parseDuration(v)
	if err != nil {
		l.errf(n, path, "%q is neither an RFC 3339 time nor an offset from start such as 30h", v)
		return time.Time{}
	}
	return start.Add(d)
}

func (l *loader) episode(s *Scenario, n *yaml.Node, path string, channels map[string]bool) Episode {
	var e Episode
	f := l.fields(n, path, []string{"id", "kind", "start", "end", "channels", "unit", "size", "factor", "rate", "driver", "ramp"},
		[]string{"id", "kind", "start", "end"})
	if v := f["id"]; v != nil {
		e.ID, _ = l.scalar(v, path+".id")
		if e.ID == "" {
			l.errf(v, path+".id", "must not be empty")
		}
	}
	if v := f["kind"]; v != nil {
		e.Kind = l.faultKind(v, path+".kind")
	}
	if v := f["start"]; v != nil {
		e.Start = l.when(s, v, path+".start")
	}
	if v := f["end"]; v != nil {
		e.End = l.when(s, v, path+".end")
		if !e.Start.IsZero() && !e.End.IsZero() && !e.End.After(e.Start) {
			l.errf(v, path+".end", "must be after start")
		}
	}
	l.episodeChannels(s, &e, n, f, path, channels)
	l.episodeParams(s, &e, n, f, path)
	if e.Kind == Relation && len(e.Channels) < 2 {
		if v := f["channels"]; v != nil {
			l.errf(v, path+".channels", "relation needs at least two channels (the first moves against the others)")
		}
	}
	return e
}

// faultKind reads an episode's kind; an unknown kind is an error naming the
// known ones.
func (l *loader) faultKind(v *yaml.Node, path string) FaultKind {
	k, _ := l.scalar(v, path)
	kind := FaultKind(k)
	known := false
	for _, fk := range faultKinds {
		known = known || fk == kind
	}
	if !known {
		names := make([]string, len(faultKinds))
		for i, fk := range faultKinds {
			names[i] = string(fk)
		}
		l.errf(v, path, "unknown kind %q (one of %s)", k, strings.Join(names, ", "))
	}
	return kind
}

// episodeChannels reads an episode's channels, or for an outage its unit
// (every channel of it).
func (l *loader) episodeChannels(s *Scenario, e *Episode, n *yaml.Node, f map[string]*yaml.Node, path string, channels map[string]bool) {
	if v := f["channels"]; v != nil {
		e.Channels = l.strs(v, path+".channels")
		if v.Kind == yaml.SequenceNode && len(e.Channels) == 0 {
			l.errf(v, path+".channels", "needs at least one channel")
		}
		seen := map[string]bool{}
		for i, c := range e.Channels {
			cp := fmt.Sprintf("%s.channels[%d]", path, i)
			if !channels[c] {
				l.errf(v.Content[i], cp, "unknown channel %q (use unit.asset.field)", c)
			}
			if seen[c] {
				l.errf(v.Content[i], cp, "channel %q named twice", c)
			}
			seen[c] = true
		}
	}
	switch v := f["unit"]; {
	case e.Kind == Outage && v == nil:
		l.errf(n, path+".unit", "required by kind %q", e.Kind)
	case e.Kind == Outage && f["channels"] != nil:
		l.errf(f["channels"], path+".channels", "not used by kind %q (it silences every channel of its unit)", e.Kind)
	case e.Kind == Outage:
		e.Unit, _ = l.scalar(v, path+".unit")
		for _, u := range s.Units {
			if u.Name != e.Unit {
				continue
			}
			for _, a := range u.Assets {
				for _, c := range a.Channels {
					e.Channels = append(e.Channels, u.Name+"."+a.Name+"."+c.Field)
				}
			}
		}
		if len(e.Channels) == 0 {
			l.errf(v, path+".unit", "unknown unit %q", e.Unit)
		}
	case v != nil:
		l.errf(v, path+".unit", "not used by kind %q", e.Kind)
	case f["channels"] == nil && e.Kind != "":
		l.errf(n, path+".channels", "missing")
	}
}

// episodeParams reads the parameters of an episode that its kind uses,
// and says which it needs or does not use.
func (l *loader) episodeParams(s *Scenario, e *Episode, n *yaml.Node, f map[string]*yaml.Node, path string) {
	// Parameters: which kinds use them, and which require them.
	type param struct {
		key      string
		uses     []FaultKind
		requires []FaultKind
	}
	params := []param{
		{"size", []FaultKind{Bias, Drift, Spikes, Relation}, []FaultKind{Bias, Drift, Spikes, Relation}},
		{"factor", []FaultKind{Noise, Effect}, []FaultKind{Noise, Effect}},
		{"rate", []FaultKind{Spikes}, []FaultKind{Spikes}},
		{"driver", []FaultKind{Relation, Effect}, []FaultKind{Relation, Effect}},
		{"ramp", []FaultKind{Relation}, nil},
	}
	has := func(ks []FaultKind) bool {
		for _, k := range ks {
			if k == e.Kind {
				return true
			}
		}
		return false
	}
	for _, p := range params {
		v := f[p.key]
		kp := path + "." + p.key
		switch {
		case v != nil && !has(p.uses):
			l.errf(v, kp, "not used by kind %q", e.Kind)
			continue
		case v == nil && has(p.requires):
			l.errf(n, kp, "required by kind %q", e.Kind)
			continue
		case v == nil:
			continue
		}
		switch p.key {
		case "size":
			e.Size = l.float(v, kp)
		case "factor":
			e.Factor = l.float(v, kp)
			if e.Kind == Noise && e.Factor <= 1 {
				l.errf(v, kp, "noise factor must be > 1")
			}
			if e.Kind == Effect && e.Factor < 0 {
				l.errf(v, kp, "must be ≥ 0")
			}
		case "rate":
			e.Rate = l.float(v, kp)
			if e.Rate <= 0 {
				l.errf(v, kp, "must be > 0")
			}
		case "driver":
			e.Driver, _ = l.scalar(v, kp)
			if s.driverIndex(e.Driver) < 0 {
				l.errf(v, kp, "unknown driver %q (global name, or unit.asset.name for an asset driver)", e.Driver)
			} else if !l.touches(s, *e) {
				l.errf(v, kp, "driver %q has no term in channel(s) %s", e.Driver, strings.Join(l.untouched(s, *e), ", "))
			}
		case "ramp":
			e.Ramp = l.duration(v, kp)
		}
	}
}

func (l *loader) touches(s *Scenario, e Episode) bool { return len(l.untouched(s, e)) == 0 }

// untouched lists the episode's channels that have no term in its driver.
func (l *loader) untouched(s *Scenario, e Episode) []string {
	d := s.driverIndex(e.Driver)
	var out []string
	for _, name := range e.Channels {
		ch := s.channel(name)
		if ch == nil {
			continue
		}
		found := false
		for _, t := range ch.Terms {
			if t.A == d || (t.Kind == Product && t.B == d) {
				found = true
			}
		}
		if !found {
			out = append(out, name)
		}
	}
	return out
}

// channel finds a channel by unit.asset.field.
func (s *Scenario) channel(name string) *Channel {
	for i := range s.Units {
		u := &s.Units[i]
		for j := range u.Assets {
			a := &u.Assets[j]
			for k := range a.Channels {
				if u.Name+"."+a.Name+"."+a.Channels[k].Field == name {
					return &a.Channels[k]
				}
			}
		}
	}
	return nil
}
