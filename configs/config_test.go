package configs

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// TestLoadExample loads the shipped, annotated example configuration and
// checks a few values as they are written in it.
func TestLoadExample(t *testing.T) {
	c, err := Load(filepath.Join("modewatch.yaml"))
	if err != nil {
		t.Fatalf("Load: %v", err)
	}
	if got, want := c.Frames.Period, 10*time.Second; got != want {
		t.Errorf("frames.period = %v, want %v", got, want)
	}
	if got, want := c.Model.HalfLife, 7*24*time.Hour; got != want {
		t.Errorf("model.halflife = %v, want %v", got, want)
	}
	if got := c.Model.Modes; got != (ModeCount{Share: 0.8}) {
		t.Errorf("model.modes = %+v", got)
	}
	if len(c.Units) != 1 || c.Units[0].Name != "coolwater" {
		t.Fatalf("units = %+v", c.Units)
	}
	// The unit overrides halflife and inherits the rest.
	m := c.UnitModel(0)
	if m.HalfLife != 72*time.Hour || m.Alpha != 0.01 || m.Sparsity != "l0:6" || !*m.Adapt {
		t.Errorf("unit model = %+v", m)
	}
	if a := c.UnitAlerts(0); a.OnDelay != (OnDelay{4, 6}) || a.OffDelay != 5*time.Minute {
		t.Errorf("unit alerts = %+v", a)
	}
	if c.Channels[1].Model == nil || *c.Channels[1].Model {
		t.Errorf("channels[1].model should be false")
	}
	if c.Channels[0].Min == nil || *c.Channels[0].Min != 0 || *c.Channels[0].Max != 400 {
		t.Errorf("channels[0] range = %v..%v", c.Channels[0].Min, c.Channels[0].Max)
	}
}

// TestShippedConfigs checks that every service configuration shipped in
// this directory loads cleanly (scenario files belong to the simulator).
func TestShippedConfigs(t *testing.T) {
	files, _ := filepath.Glob("*.yaml")
	n := 0
	for _, f := range files {
		if strings.HasPrefix(f, "scenario") || strings.HasPrefix(f, "grid") {
			continue
		}
		n++
		t.Run(f, func(t *testing.T) {
			if _, err := Load(f); err != nil {
				t.Errorf("%v", err)
			}
		})
	}
	if n == 0 {
		t.Fatal("no service configurations found")
	}
}

// TestEmptyIsDefaults: an empty file and the zero Config give the defaults.
func TestEmptyIsDefaults(t *testing.T) {
	c, err := Parse("empty.yaml", nil)
	if err != nil {
		t.Fatal(err)
	}
	if c.HTTP.Listen != DefaultListen || c.StateDir != DefaultStateDir || c.Model.Alpha != DefaultAlpha ||
		c.Model.Sparsity != DefaultSparsity || c.Alerts.OnDelay != (OnDelay{3, 5}) || c.CheckpointInterval != DefaultCheckpointInterval {
		t.Errorf("defaults not applied: %+v", c)
	}
	if got := c.Intake.Subjects; len(got) != 1 || got[0] != "modewatch.readings.>" {
		t.Errorf("default subjects = %v", got)
	}
	var z Config
	z.ApplyDefaults()
	if err := z.Validate(); err != nil {
		t.Errorf("zero Config with defaults does not validate: %v", err)
	}
}

// TestBrokenReportsEverything: a configuration with many problems yields
// every one of them at once, each with its line and column.
func TestBrokenReportsEverything(t *testing.T) {
	_, err := Load(filepath.Join("testdata", "broken.yaml"))
	var es Errors
	if !errors.As(err, &es) {
		t.Fatalf("want Errors, got %T %v", err, err)
	}
	if !errors.Is(err, ErrInvalid) {
		t.Errorf("errors.Is(err, ErrInvalid) = false")
	}
	// Positions counted by hand in testdata/broken.yaml.
	want := []struct {
		line, col int
		text      string
	}{
		{2, 26, `"http//bad" is not a server URL`},
		{2, 3, "at most one of user/password, token"}, // placed at the server section
		{5, 8, "cert and key go together"},
		{7, 27, `"bad subject" is not a valid subject`},
		{8, 14, `durable "dur1" needs a stream`},
		{10, 11, `duration "10 seconds"`},
		{11, 14, `"minutes" is not one of ns, us, ms, s`},
		{12, 14, `duration "-5s" is negative`},
		{17, 10, "valid range is empty"},
		{18, 11, `channel "coolwater.flow" is already defined as channels[0]`},
		{21, 5, `unknown key "colour"`},
		{23, 13, `sparsity "l0:zero"`},
		{24, 10, `modes "auto:1.5"`},
		{25, 10, "0.7 is not a false-alarm rate"},
		{26, 10, `want true or false, found "maybe"`},
		{27, 11, `want theory or empirical:FILE`},
		{31, 32, `channel "nosuch.channel" is not in the channel map`},
		{32, 11, `"steam.drum" must be one subject token`},
		{33, 16, `channel "coolwater.flow" already belongs to unit "coolwater"`},
		{35, 13, "want 1 ≤ n ≤ m"},
		{36, 13, "not a fraction of the limit"},
		{39, 27, "is not above the previous band"},
		{41, 12, "is not an http(s) URL"},
		{42, 1, `unknown key "htpp" (did you mean "http"?)`},
		{45, 10, `"loud" is not one of debug`},
	}
	for _, w := range want {
		found := false
		for _, e := range es {
			if e.Line == w.line && e.Column == w.col && strings.Contains(e.Msg, w.text) {
				found = true
				if !strings.HasPrefix(e.Error(), filepath.Join("testdata", "broken.yaml")+":") {
					t.Errorf("error does not start with the file name: %s", e)
				}
			}
		}
		if !found {
			t.Errorf("missing error at %d:%d containing %q", w.line, w.col, w.text)
		}
	}
	if len(es) != len(want) {
		t.Errorf("got %d errors, want %d:\n%v", len(es), len(want), err)
	}
	for i := 1; i < len(es); i++ {
		if es[i].Line < es[i-1].Line {
			t.Errorf("errors not sorted by line: %d after %d", es[i].Line, es[i-1].Line)
		}
	}
}

func TestYAMLSyntaxError(t *testing.T) {
	_, err := Parse("bad.yaml", []byte("server:\n  urls: [a, b\nmodel: {}\n"))
	var es Errors
	if !errors.As(err, &es) || len(es) != 1 || es[0].Line == 0 {
		t.Fatalf("want one located syntax error, got %v", err)
	}
	if !strings.HasPrefix(es[0].Error(), "bad.yaml:") {
		t.Errorf("error %q lacks file name", es[0])
	}
}

func TestTypeErrors(t *testing.T) {
	cases := []struct {
		name, yaml, want string
	}{
		{"list for section", "model: [1, 2]", "want a section"},
		{"section for list", "units: {a: b}", "want a list"},
		{"string for int", "frames: {max_channels: many}", "want a whole number"},
		{"float for int", "model: {warmup: 1.5}", "want a whole number"},
		{"nan float", "model: {alpha: .nan}", "want a finite number"},
		{"duplicate key", "log: {level: info, level: debug}", `duplicate key "level"`},
		{"section for duration", "model: {halflife: {d: 1}}", "want a duration"},
		{"negative queue", "intake: {queue: {messages: -1}}", "may not be negative"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse("x.yaml", []byte(tc.yaml))
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("got %v, want an error containing %q", err, tc.want)
			}
			if err != nil && !strings.Contains(err.Error(), "x.yaml:1:") {
				t.Errorf("error lacks position: %v", err)
			}
		})
	}
}

// parseCase is one input of a value parser, the value it must give and
// whether it is accepted (a refused input must give the zero value).
type parseCase[T comparable] struct {
	in   string
	want T
	ok   bool
}

// checkParse runs parse, named name in messages, on every case.
func checkParse[T comparable](t *testing.T, name string, parse func(string) (T, error), cases []parseCase[T]) {
	t.Helper()
	for _, tc := range cases {
		got, err := parse(tc.in)
		if (err == nil) != tc.ok || got != tc.want {
			t.Errorf("%s(%q) = %+v, %v", name, tc.in, got, err)
		}
	}
}

func TestParseValues(t *testing.T) {
	mc := []parseCase[ModeCount]{
		{"3", ModeCount{Count: 3}, true},
		{"auto:0.9", ModeCount{Share: 0.9}, true},
		{"auto:1", ModeCount{Share: 1}, true},
		{"0", ModeCount{}, false},
		{"auto:0", ModeCount{}, false},
		{"auto:", ModeCount{}, false},
		{"three", ModeCount{}, false},
	}
	checkParse(t, "ParseModeCount", ParseModeCount, mc)
	for _, tc := range mc {
		if got, _ := ParseModeCount(tc.in); tc.ok && got.String() != tc.in {
			t.Errorf("ModeCount %q round-trips to %q", tc.in, got.String())
		}
	}
	checkParse(t, "ParseDuration", ParseDuration, []parseCase[time.Duration]{
		{"7d", 7 * 24 * time.Hour, true},
		{"1h30m", 90 * time.Minute, true},
		{"250ms", 250 * time.Millisecond, true},
		{"-1s", 0, false},
		{"-2d", 0, false},
		{"1 day", 0, false},
	})
	checkParse(t, "ParseLimits", ParseLimits, []parseCase[Limits]{
		{"theory", Limits{Method: LimitsTheory}, true},
		{"empirical:normal.lp", Limits{Method: LimitsEmpirical, File: "normal.lp"}, true},
		{"empirical:", Limits{}, false},
		{"box", Limits{}, false},
	})
}

func TestSparsitySyntax(t *testing.T) {
	for _, s := range []string{"none", "l0:5", "l1:2.5", "l0pen:0.1", "l1pen:0.2", "l1sqrt:0.3", "logpen:0.1", "logpen:0.1,0.01", "exppen:1,0.5"} {
		if err := CheckSparsity(s); err != nil {
			t.Errorf("CheckSparsity(%q) = %v", s, err)
		}
	}
	for _, s := range []string{"", "l0", "l0:0", "l1:0.5", "l0pen:-1", "logpen:1,0", "l2:3", "dense"} {
		if err := CheckSparsity(s); err == nil {
			t.Errorf("CheckSparsity(%q) accepted", s)
		}
	}
}

// TestAuthWithoutURLs: credentials make no sense for the embedded server.
func TestAuthWithoutURLs(t *testing.T) {
	_, err := Parse("a.yaml", []byte("server:\n  token: abc\n"))
	if err == nil || !strings.Contains(err.Error(), "a.yaml:2:3") || !strings.Contains(err.Error(), "no urls") {
		t.Errorf("got %v", err)
	}
}

func TestLoadMissingFile(t *testing.T) {
	_, err := Load(filepath.Join("testdata", "does-not-exist.yaml"))
	if !errors.Is(err, os.ErrNotExist) {
		t.Errorf("got %v, want not-exist", err)
	}
	if errors.Is(err, ErrInvalid) {
		t.Errorf("an I/O error must not be ErrInvalid")
	}
}

// TestCheckFiles: files the configuration names but that cannot be read
// are reported with their place.
func TestCheckFiles(t *testing.T) {
	c, err := Parse("files.yaml", []byte(`server:
  urls: [nats://a:4222]
  credentials_file: testdata/no-such.creds
  tls:
    ca: testdata/broken.yaml
model:
  file: testdata/no-such-model.json
`))
	if err != nil {
		t.Fatal(err)
	}
	err = c.CheckFiles()
	var es Errors
	if !errors.As(err, &es) || len(es) != 2 {
		t.Fatalf("got %v", err)
	}
	// Positions counted by hand in the YAML above.
	if es[0].Line != 3 || es[0].Column != 21 || es[0].Path != "server.credentials_file" {
		t.Errorf("first problem at %d:%d %s", es[0].Line, es[0].Column, es[0].Path)
	}
	if es[1].Line != 7 || es[1].Column != 9 || !strings.Contains(es[1].Msg, "no such file") {
		t.Errorf("second problem %v", es[1])
	}
	var zero Config
	if err := zero.CheckFiles(); err != nil {
		t.Errorf("zero config: %v", err)
	}
}

// TestUnitRateRules: a unit may set its own flood and chattering figures;
// the rest inherit.
func TestUnitRateRules(t *testing.T) {
	_, err := Parse("u.yaml", []byte(`
alerts: {flood: {count: 20, window: 15m}}
units:
  - name: boiler
    alerts: {chattering: {count: 5, window: 2m}}
  - name: bad
    alerts: {flood: {count: 1, window: 0s}}
`))
	if err == nil || !strings.Contains(err.Error(), "u.yaml:7:29: units[1].alerts.flood.count") || !strings.Contains(err.Error(), "units[1].alerts.flood.window") {
		t.Fatalf("got %v", err)
	}
	c, err := Parse("u.yaml", []byte(`
alerts: {flood: {count: 20, window: 15m}}
units:
  - name: boiler
    alerts: {chattering: {count: 5, window: 2m}}
`))
	if err != nil {
		t.Fatal(err)
	}
	a := c.AlertsFor("boiler")
	if a.Flood != (RateRule{20, 15 * time.Minute}) || a.Chatter != (RateRule{5, 2 * time.Minute}) {
		t.Errorf("boiler alerts %+v", a)
	}
}

// The core-NATS queue bounds reach the configuration as written; zero keeps
// the message source's defaults.
func TestIntakeQueue(t *testing.T) {
	c, err := Parse("q.yaml", []byte("intake: {queue: {messages: 262144, bytes: 268435456}}\n"))
	if err != nil {
		t.Fatal(err)
	}
	if q := c.Intake.Queue; q.Messages != 262144 || q.Bytes != 268435456 {
		t.Errorf("queue = %+v", q)
	}
	c, err = Parse("empty.yaml", nil)
	if err != nil {
		t.Fatal(err)
	}
	if q := c.Intake.Queue; q != (Queue{}) {
		t.Errorf("default queue = %+v, want zero (the source's defaults)", q)
	}
}

// TestRenamedKeys: the top-level keys an earlier release read are refused at
// their line and column with the spelling to write instead, alongside every
// other problem of the file, and the new spellings are accepted.
func TestRenamedKeys(t *testing.T) {
	old := "frames: {period: 10s}\n" +
		"sources:\n  subjects: [plant.>]\n" +
		"sinks: {stdout: true}\n" +
		"  \n" +
		"data_dir: /var/lib/x\n" +
		"model: {alpha: 2}\n"
	_, err := Parse("config.yaml", []byte(old))
	var es Errors
	if !errors.As(err, &es) || !errors.Is(err, ErrInvalid) {
		t.Fatalf("want Errors, got %T %v", err, err)
	}
	got := make([]string, len(es))
	for i, e := range es {
		got[i] = e.Error()
	}
	want := []string{
		`config.yaml:2:1: key "sources" was renamed: write "intake"`,
		`config.yaml:4:1: key "sinks" was renamed: write "delivery"`,
		`config.yaml:6:1: key "data_dir" was renamed: write "state_dir"`,
		`config.yaml:7:16: model.alpha: 2 is not a false-alarm rate in (0, 0.5)`,
	}
	if strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("errors:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	c, err := Parse("config.yaml", []byte("frames: {period: 10s}\nintake:\n  subjects: [plant.>]\ndelivery: {stdout: true}\nstate_dir: /var/lib/x\n"))
	if err != nil {
		t.Fatal(err)
	}
	if c.Intake.Subjects[0] != "plant.>" || !c.Delivery.Stdout || c.StateDir != "/var/lib/x" {
		t.Errorf("new keys not read: %+v %+v %q", c.Intake, c.Delivery, c.StateDir)
	}
}

// TestLocationQuiet: alerts.location_quiet reaches a unit as written, a
// unit may override it, zero leaves the alarm engine's default, and a
// negative one is refused at its place.
func TestLocationQuiet(t *testing.T) {
	c, err := Parse("l.yaml", []byte(`
alerts: {location_quiet: 30m}
units:
  - name: boiler
    alerts: {location_quiet: 1h}
  - name: air
`))
	if err != nil {
		t.Fatal(err)
	}
	if q := c.AlertsFor("boiler").LocationQuiet; q != time.Hour {
		t.Errorf("boiler location_quiet = %v, want 1h", q)
	}
	if q := c.AlertsFor("air").LocationQuiet; q != 30*time.Minute {
		t.Errorf("air location_quiet = %v, want 30m", q)
	}
	c, err = Parse("empty.yaml", nil)
	if err != nil {
		t.Fatal(err)
	}
	if q := c.AlertsFor("any").LocationQuiet; q != 0 {
		t.Errorf("default location_quiet = %v, want 0 (the alarm engine's default)", q)
	}
	_, err = Parse("n.yaml", []byte("alerts: {location_quiet: -5m}\n"))
	if err == nil || !strings.Contains(err.Error(), "n.yaml:1:26: alerts.location_quiet") {
		t.Errorf("negative location_quiet: got %v", err)
	}
}

// TestCalibrationFolds: alerts.calibration_folds is read at the top level
// (one calibration serves every unit), from 1 to MaxCalibrationFolds; a
// unit's own value or one out of range is refused with its place.
func TestCalibrationFolds(t *testing.T) {
	c, err := Parse("f.yaml", []byte("alerts: {calibration_folds: 2}\n"))
	if err != nil || c.Alerts.CalibrationFolds != 2 {
		t.Fatalf("got %v, %+v", err, c)
	}
	_, err = Parse("f.yaml", []byte(`
alerts: {calibration_folds: 9}
units:
  - name: boiler
    alerts: {calibration_folds: 2}
`))
	if err == nil || !strings.Contains(err.Error(), "alerts.calibration_folds: 9 blocks") || !strings.Contains(err.Error(), "units[0].alerts.calibration_folds: set at the top level only") {
		t.Fatalf("got %v", err)
	}
}

// TestCalibrationShape: alerts.calibration_shape takes shared or own at
// the top level (one calibration serves every unit) and defaults to
// shared; a unit's own value or another word is refused with its place.
func TestCalibrationShape(t *testing.T) {
	c, err := Parse("s.yaml", []byte("alerts: {calibration_shape: own}\n"))
	if err != nil || c.Alerts.CalibrationShape != ShapeOwn {
		t.Fatalf("got %v, %+v", err, c)
	}
	if got := DefaultAlerts().CalibrationShape; got != ShapeShared {
		t.Errorf("default %q, want %q", got, ShapeShared)
	}
	_, err = Parse("s.yaml", []byte(`
alerts: {calibration_shape: pooled}
units:
  - name: boiler
    alerts: {calibration_shape: own}
`))
	if err == nil || !strings.Contains(err.Error(), `alerts.calibration_shape: "pooled": want shared or own`) || !strings.Contains(err.Error(), "units[0].alerts.calibration_shape: set at the top level only") {
		t.Fatalf("got %v", err)
	}
}

// TestShrink: model.shrink takes none, whole or channel, at the top level
// and per unit (a unit inherits the top level's), and anything else is
// refused at its place.
func TestShrink(t *testing.T) {
	c, err := Parse("s.yaml", []byte("model: {shrink: channel}\nunits:\n  - name: boiler\n    model: {shrink: none}\n  - name: air\n"))
	if err != nil {
		t.Fatal(err)
	}
	if got := c.ModelFor("boiler").Shrink; got != ShrinkNone {
		t.Errorf("boiler: %q, want none", got)
	}
	if got := c.ModelFor("air").Shrink; got != ShrinkChannel {
		t.Errorf("air: %q, want channel", got)
	}
	if c, _ = Parse("e.yaml", nil); c.ModelFor("any").Shrink != DefaultShrink {
		t.Errorf("default: %q, want %q", c.ModelFor("any").Shrink, DefaultShrink)
	}
	_, err = Parse("s.yaml", []byte("model: {shrink: hard}\n"))
	if err == nil || !strings.Contains(err.Error(), "s.yaml:1:17: model.shrink") {
		t.Errorf("got %v, want an error at s.yaml:1:17 naming model.shrink", err)
	}
}
