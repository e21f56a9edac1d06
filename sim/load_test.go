package sim

import (
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"
)

// TestLoadErrorsAllAtOnce checks that every problem in a broken scenario is
// reported in one error, each with its file:line:column. The expected
// positions were read off testdata/bad.yaml by hand (1-based, as yaml.v3
// reports them).
func TestLoadErrorsAllAtOnce(t *testing.T) {
	_, err := Load("testdata/bad.yaml")
	var le *LoadError
	if !errors.As(err, &le) {
		t.Fatalf("want *LoadError, got %v", err)
	}
	want := []struct {
		line, col int
		field     string
		msg       string
	}{
		{2, 7, "seed", "not an unsigned integer"},
		{6, 9, "jitter", "less than half the period"},
		{7, 1, "colour", "unknown key"},
		{11, 11, "drivers[0].walk.tau", "missing"},
		{12, 11, "drivers[1].name", "defined twice"},
		{19, 59, "units[0].assets[0].channels[0].noise", "≥ 0"},
		{19, 80, "units[0].assets[0].channels[0].terms.speed", `unknown driver "speed"`},
		{20, 13, "units[0].assets[0].channels[1].name", "defined twice"},
		{20, 48, "units[0].assets[0].channels[1].base", "not a finite number"},
		{21, 20, "units[0].assets[0].channels[2].name", "not a valid name"},
		{21, 70, "units[0].assets[0].channels[2].decimals", "[0, 9]"},
		{23, 5, "faults[0].size", `required by kind "bias"`},
		{23, 42, "faults[0].end", "after start"},
		{24, 20, "faults[1].kind", `unknown kind "melt"`},
		{24, 57, "faults[1].channels[0]", `unknown channel "plant.pump.head"`},
		{25, 82, "faults[2].size", `not used by kind "stuck"`},
	}
	if len(le.Errs) != len(want) {
		t.Fatalf("got %d problems, want %d:\n%v", len(le.Errs), len(want), err)
	}
	for i, w := range want {
		g := le.Errs[i]
		if g.File != "testdata/bad.yaml" || g.Line != w.line || g.Column != w.col || g.Path != w.field || !strings.Contains(g.Msg, w.msg) {
			t.Errorf("problem %d: got %v, want %d:%d %s: …%s…", i, g, w.line, w.col, w.field, w.msg)
		}
	}
	if !strings.Contains(err.Error(), "testdata/bad.yaml:19:59: units[0].assets[0].channels[0].noise: must be ≥ 0") {
		t.Errorf("message lacks the positioned line:\n%v", err)
	}
	var fe *FieldError
	if !errors.As(err, &fe) {
		t.Error("errors.As does not reach the individual FieldError")
	}
}

const minimal = `
seed: 7
start: 2026-01-05T00:00:00Z
duration: 2h
period: 30s
drivers:
  - {name: load, mean: 0.5, daily: {amplitude: 0.1, peak: 14h}}
units:
  - name: plant
    assets:
      - name: pump
        count: 3
        drivers:
          - {name: speed, mean: 1000, steps: {levels: [-10, 10], hold: 1h}}
        channels:
          - {name: flow, eng_unit: m3/h, base: 10, noise: 1, terms: {load: 2, speed: 0.1, load*speed: 0.01, load^2: 3}}
faults:
  - {id: F1, kind: relation, start: 2026-01-05T00:30:00Z, end: 1h, channels: [plant.pump02.flow, plant.pump03.flow], driver: load, size: 0.1}
`

func TestLoadTable(t *testing.T) {
	cases := []struct {
		name string
		edit func(string) string
		want string // substring of the error, "" for success
	}{
		{"minimal", func(s string) string { return s }, ""},
		{"syntax", func(s string) string { return s + "  - [unclosed\n" }, "yaml: line"},
		{"empty", func(string) string { return "" }, "empty scenario"},
		{"not a mapping", func(string) string { return "- 1\n- 2\n" }, "case.yaml:1:1: expected a mapping"},
		{"duplicate key", func(s string) string { return s + "seed: 8\n" }, "seed: duplicate key (first at line 2)"},
		{"bad duration", func(s string) string { return strings.Replace(s, "duration: 2h", "duration: two hours", 1) }, `4:11: duration: "two hours" is not a duration`},
		{"bad time", func(s string) string { return strings.Replace(s, "2026-01-05T00:00:00Z", "yesterday", 1) }, `3:8: start: "yesterday" is not an RFC 3339 time`},
		{"local driver is per asset", func(s string) string { return strings.Replace(s, "driver: load", "driver: speed", 1) }, `unknown driver "speed"`},
		{"relation driver must touch every channel", func(s string) string {
			return strings.Replace(s, "terms: {load: 2, speed: 0.1, load*speed: 0.01, load^2: 3}", "terms: {speed: 0.1}", 1)
		}, `driver "load" has no term in channel(s) plant.pump02.flow, plant.pump03.flow`},
		{"relation needs two", func(s string) string {
			return strings.Replace(s, "plant.pump02.flow, plant.pump03.flow", "plant.pump02.flow", 1)
		}, "at least two channels"},
		{"walk without tau", func(s string) string { return strings.Replace(s, "peak: 14h}}", "peak: 14h}, walk: {sigma: 1}}", 1) }, "drivers[0].walk.tau: missing"},
		{"peak past midnight", func(s string) string { return strings.Replace(s, "peak: 14h", "peak: 25h", 1) }, "below 24h"},
		{"term gain not a number", func(s string) string { return strings.Replace(s, "load^2: 3", "load^2: lots", 1) }, `terms.load^2: "lots" is not a finite number`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s, err := LoadBytes("case.yaml", []byte(c.edit(minimal)))
			if c.want == "" {
				if err != nil {
					t.Fatal(err)
				}
				return
			}
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("got %v (scenario %v), want error containing %q", err, s != nil, c.want)
			}
			if !strings.HasPrefix(err.Error(), "sim: case.yaml:") {
				t.Errorf("error %q does not start with sim: case.yaml:", err)
			}
		})
	}
}

// TestLoadExpansion checks the parsed form: counted assets are numbered with
// two digits, each copy gets its own local drivers, terms resolve local names
// first, and fault times accept both RFC 3339 and offsets from start.
func TestLoadExpansion(t *testing.T) {
	s, err := LoadBytes("minimal.yaml", []byte(minimal))
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, c := range s.Channels() {
		names = append(names, c.Name)
	}
	if got, want := strings.Join(names, " "), "plant.pump01.flow plant.pump02.flow plant.pump03.flow"; got != want {
		t.Errorf("channels %q, want %q", got, want)
	}
	var drv []string
	for _, d := range s.Drivers {
		drv = append(drv, d.Name)
	}
	if got, want := strings.Join(drv, " "), "load plant.pump01.speed plant.pump02.speed plant.pump03.speed"; got != want {
		t.Errorf("drivers %q, want %q", got, want)
	}
	terms := s.Units[0].Assets[1].Channels[0].Terms
	want := []Term{{Linear, 0, 0, 2}, {Linear, 2, 0, 0.1}, {Product, 0, 2, 0.01}, {Square, 0, 0, 3}}
	if fmt.Sprint(terms) != fmt.Sprint(want) {
		t.Errorf("pump02 terms %v, want %v", terms, want)
	}
	e := s.Episodes[0]
	if !e.Start.Equal(s.Start.Add(30*time.Minute)) || !e.End.Equal(s.Start.Add(time.Hour)) {
		t.Errorf("episode times %v..%v", e.Start, e.End)
	}
	if s.Samples() != 240 {
		t.Errorf("samples %d, want 2h/30s = 240", s.Samples())
	}
	if c := s.Units[0].Assets[0].Channels[0]; c.Decimals != 3 || c.Min <= c.Max {
		t.Errorf("defaults: decimals %d (want 3), clamp %v..%v (want none)", c.Decimals, c.Min, c.Max)
	}
}

func TestParseDuration(t *testing.T) {
	for _, c := range []struct {
		in   string
		want time.Duration
		ok   bool
	}{
		{"20s", 20 * time.Second, true},
		{"1h30m", 90 * time.Minute, true},
		{"3d", 72 * time.Hour, true},
		{"0.5d", 12 * time.Hour, true},
		{"d", 0, false},
		{"3 days", 0, false},
		{"7d6h", 7*24*time.Hour + 6*time.Hour, true},
		{"10d2h30m", 242*time.Hour + 30*time.Minute, true},
		{"1d-2h", 0, false},
		{"xd2h", 0, false},
	} {
		got, err := parseDuration(c.in)
		if (err == nil) != c.ok || got != c.want {
			t.Errorf("parseDuration(%q) = %v, %v; want %v, ok=%v", c.in, got, err, c.want, c.ok)
		}
	}
}

// TestLoadSizeLimit: counts multiply, so the expanded size is bounded.
func TestLoadSizeLimit(t *testing.T) {
	big := strings.Replace(minimal, "count: 3", "count: 100000", 1)
	big = strings.Replace(big, "        channels:\n", "        channels:\n          - {name: f2, eng_unit: m, base: 1, noise: 1}\n          - {name: f3, eng_unit: m, base: 1, noise: 1}\n", 1)
	_, err := LoadBytes("big.yaml", []byte(big))
	if err == nil || !strings.Contains(err.Error(), "more than 200000 channels") {
		t.Fatalf("got %v", err)
	}
}

// TestLoadRealismKeys: the keys the realism plants use (split, trend,
// moves, quantum, gate, rest, outage) are parsed, and their misuse is
// reported with its place.
func TestLoadRealismKeys(t *testing.T) {
	good := strings.Replace(minimal, "duration: 2h", "duration: 2h\nsplit: 1h", 1)
	good = strings.Replace(good, "daily: {amplitude: 0.1, peak: 14h}}", "daily: {amplitude: 0.1, peak: 14h}, trend: {per_day: 2, reset: 1d}, moves: [{at: 1h30m, by: 0.2, over: 10m}]}", 1)
	good = strings.Replace(good, "load^2: 3}}", "load^2: 3}, quantum: 0.5, gate: speed, rest: 0}", 1)
	good += "  - {id: F2, kind: outage, start: 1h10m, end: 1h40m, unit: plant}\n"
	s, err := LoadBytes("good.yaml", []byte(good))
	if err != nil {
		t.Fatal(err)
	}
	d := s.Drivers[0]
	ch := s.Units[0].Assets[0].Channels[0]
	if !s.Split.Equal(s.Start.Add(time.Hour)) || d.Trend != (Trend{PerDay: 2, Reset: 24 * time.Hour}) ||
		len(d.Moves) != 1 || !d.Moves[0].At.Equal(s.Start.Add(90*time.Minute)) || d.Moves[0].By != 0.2 || d.Moves[0].Over != 10*time.Minute ||
		ch.Quantum != 0.5 || !ch.Gate.On || s.Drivers[ch.Gate.Driver].Name != "plant.pump01.speed" {
		t.Errorf("parsed %+v, %+v, %+v", s.Split, d, ch)
	}
	if e := s.Episodes[1]; e.Kind != Outage || e.Unit != "plant" || len(e.Channels) != 3 {
		t.Errorf("outage %+v, want the unit's 3 channels", e)
	}
	for _, c := range []struct{ from, to, want string }{
		{"split: 1h", "split: 3h", "split: must lie after start"},
		{"rest: 0}", "rest: 0, gate: nope}", "duplicate key"},
		{"gate: speed, rest: 0}", "rest: 1}", "rest: needs a gate"},
		{"gate: speed", "gate: nope", `gate: unknown driver "nope"`},
		{"unit: plant}", "unit: tank}", `unit: unknown unit "tank"`},
		{"unit: plant}", "channels: [plant.pump01.flow]}", `faults[1].unit: required by kind "outage"`},
		{"by: 0.2, over: 10m}", "over: 10m}", "moves[0].by: missing"},
	} {
		bad := strings.Replace(good, c.from, c.to, 1)
		_, err := LoadBytes("bad.yaml", []byte(bad))
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s → %s: got %v, want …%s…", c.from, c.to, err, c.want)
		}
	}
}
