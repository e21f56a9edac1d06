package cli

import (
	"bufio"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
	"gonum.org/v1/gonum/floats/scalar"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/sim"
	"modewatch/tracker/tepdata"
)

// demoLog writes the first hours of the shipped demo scenario (invented
// data, deterministic) and returns its path and its lines.
func demoLog(t *testing.T, hours int) (string, []string) {
	t.Helper()
	return scenarioLog(t, testkit.DemoScenario(t, time.Duration(hours)*time.Hour))
}

// scenarioLog writes the readings of scenario s as line protocol to a
// temporary file and returns its path and its lines.
func scenarioLog(t *testing.T, s *sim.Scenario) (string, []string) {
	t.Helper()
	b := testkit.LineProtocol(t, s)
	p := filepath.Join(t.TempDir(), "plant.lp")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p, strings.Split(strings.TrimSuffix(string(b), "\n"), "\n")
}

func decodeSummary(t *testing.T, out string) summary {
	t.Helper()
	var s summary
	if err := json.Unmarshal([]byte(out), &s); err != nil {
		t.Fatalf("replay --json output is not JSON: %v\n%s", err, out)
	}
	return s
}

func TestReplayEmptyFile(t *testing.T) {
	p := filepath.Join(t.TempDir(), "empty.lp")
	os.WriteFile(p, nil, 0o644)
	code, _, errs := runCLI(t, "", "replay", p)
	if code != ExitFailure || !strings.Contains(errs, "empty") {
		t.Errorf("exit %d, stderr %q", code, errs)
	}
	// With the period given, the summary still comes out, with zero frames.
	code, out, errs := runCLI(t, "", "replay", "--period", "10s", "--json", p)
	if code != ExitFailure || !strings.Contains(errs, "no usable line-protocol data") {
		t.Errorf("exit %d, stderr %q", code, errs)
	}
	if s := decodeSummary(t, out); s.Frames != 0 || s.Lines.Total != 0 {
		t.Errorf("summary %+v", s)
	}
}

func TestReplayGarbage(t *testing.T) {
	p := filepath.Join(t.TempDir(), "garbage.lp")
	os.WriteFile(p, []byte("this is not line protocol\n\x00\x01 = = ,\n{\"json\": true}\n"), 0o644)
	code, _, errs := runCLI(t, "", "replay", p)
	if code != ExitFailure || !strings.Contains(errs, "cannot infer the frame period") {
		t.Errorf("exit %d, stderr %q", code, errs)
	}
	code, out, errs := runCLI(t, "", "replay", "--period", "10s", "--json", p)
	if code != ExitFailure {
		t.Errorf("exit %d", code)
	}
	for _, want := range []string{p + ":1:", p + ":2:", p + ":3:"} {
		if !strings.Contains(errs, want) {
			t.Errorf("stderr lacks %q:\n%s", want, errs)
		}
	}
	s := decodeSummary(t, out)
	if s.Lines.Total != 3 || s.Lines.Rejected != 3 || s.Lines.Accepted != 0 || s.Frames != 0 {
		t.Errorf("lines %+v frames %d", s.Lines, s.Frames)
	}
}

// TestReplaySomeBadLines: bad lines are reported with their place and
// counted; the rest is scored and the exit status is 0.
func TestReplaySomeBadLines(t *testing.T) {
	_, lines := demoLog(t, 4)
	bad := map[int]string{ // 1-based line numbers of the file written below
		3:    "coolwater,asset=pump01 flow=abc 1772409600000000000",
		500:  "coolwater,asset=pump01 flow= 1772409600000000000",
		2000: "not a line at all",
	}
	var b strings.Builder
	n := 0
	for _, l := range lines {
		n++
		if s, ok := bad[n]; ok {
			b.WriteString(s + "\n")
			n++
		}
		b.WriteString(l + "\n")
	}
	p := filepath.Join(t.TempDir(), "some-bad.lp")
	os.WriteFile(p, []byte(b.String()), 0o644)
	code, out, errs := runCLI(t, "", "replay", "--json", p)
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for ln := range bad {
		if !strings.Contains(errs, fmt.Sprintf("%s:%d:", p, ln)) {
			t.Errorf("bad line %d not reported:\n%s", ln, errs)
		}
	}
	s := decodeSummary(t, out)
	if s.Lines.Rejected != 3 || s.Lines.Accepted != uint64(len(lines)) || s.Lines.Total != uint64(len(lines)+3) {
		t.Errorf("lines %+v, want %d accepted and 3 rejected", s.Lines, len(lines))
	}
	// 4 h at the demo's 20 s period: 720 frames (± the partial edges).
	if s.Frames < 715 || s.Frames > 722 || s.Period != "20s" || !s.PeriodInferred {
		t.Errorf("frames %d period %s inferred %v", s.Frames, s.Period, s.PeriodInferred)
	}
	if s.Channels != 50 || len(s.Units) != 4 {
		t.Errorf("channels %d, units %d (the demo plant has 50 channels in 4 units)", s.Channels, len(s.Units))
	}
}

// TestFitReplayModel: fit writes a model; replay --model starts from it;
// --adapt=false holds it fixed (modes identical to the file's), and the
// scores and alerts files are written as documented.
func TestFitReplayModel(t *testing.T) {
	p, _ := demoLog(t, 12)
	dir := t.TempDir()
	model := filepath.Join(dir, "model.json")
	code, out, errs := runCLI(t, "", "fit", "--quiet", "--json", "--out", model, p)
	if code != ExitOK {
		t.Fatalf("fit: exit %d: %s", code, errs)
	}
	var fitted struct {
		Frames uint64
		Units  []struct {
			Name  string
			Modes []pipeline.ModeView
		}
	}
	if err := json.Unmarshal([]byte(out), &fitted); err != nil || len(fitted.Units) != 4 {
		t.Fatalf("fit --json: %v %s", err, out)
	}
	mf, err := pipeline.ReadModel(model)
	if err != nil {
		t.Fatal(err)
	}
	if mf.Version != pipeline.ModelVersion || mf.Units[0].Settings.HalfLife != 0 {
		t.Errorf("model version %d, halflife %v (fit weighs frames equally)", mf.Version, mf.Units[0].Settings.HalfLife)
	}

	scores := filepath.Join(dir, "scores.lp")
	alertsFile := filepath.Join(dir, "alerts.jsonl")
	code, out, errs = runCLI(t, "", "replay", "--quiet", "--json", "--model", model, "--adapt=false",
		"--scores", scores, "--alerts", alertsFile, p)
	if code != ExitOK {
		t.Fatalf("replay: exit %d: %s", code, errs)
	}
	s := decodeSummary(t, out)
	for _, u := range s.Units {
		if u.ModelState != "baseline" {
			t.Errorf("unit %s state %s, want baseline with --adapt=false", u.Name, u.ModelState)
		}
	}
	// The modes are those of the model file, untouched.
	for _, fu := range fitted.Units {
		var got []modeSummary
		for _, m := range s.Modes {
			if m.Unit == fu.Name {
				got = append(got, m)
			}
		}
		if len(got) != len(fu.Modes) {
			t.Fatalf("unit %s: %d modes after replay, %d fitted", fu.Name, len(got), len(fu.Modes))
		}
		for j := range got {
			if got[j].ID != fu.Modes[j].ID || fmt.Sprint(got[j].Loadings) != fmt.Sprint(fu.Modes[j].Loadings) {
				t.Errorf("unit %s mode %d changed under --adapt=false", fu.Name, j)
			}
		}
	}
	// Scores: one line per unit and scored frame, every one decodable.
	lines := readScores(t, scores)
	units := map[string]int{}
	for _, l := range lines {
		units[l.unit]++
		for _, want := range []string{"t2", "t2_limit", "spe", "spe_limit", "phi", "phi_limit", "missing"} {
			if _, ok := l.fields[want]; !ok {
				t.Fatalf("score line without %s: %v", want, l.fields)
			}
		}
	}
	if len(lines) == 0 {
		t.Fatal("no score lines")
	}
	for _, u := range s.Units {
		if units[u.Name] != int(u.Frames) {
			t.Errorf("unit %s: %d score lines, %d frames scored", u.Name, units[u.Name], u.Frames)
		}
	}
	// Alerts: JSON lines, and the count of distinct incident ids matches.
	b, err := os.ReadFile(alertsFile)
	if err != nil {
		t.Fatal(err)
	}
	ids := map[string]bool{}
	for _, l := range strings.Split(strings.TrimSpace(string(b)), "\n") {
		if l == "" {
			continue
		}
		var r struct {
			ID, Kind, Caution string
			Revision          int
		}
		if err := json.Unmarshal([]byte(l), &r); err != nil {
			t.Fatalf("alert line %q: %v", l, err)
		}
		if r.Caution == "" || r.Revision < 1 {
			t.Errorf("alert record without caution or revision: %s", l)
		}
		if r.Kind != "flood" && r.Kind != "notice" { // a notice is no alert
			ids[r.ID] = true
		}
	}
	if len(ids) != s.Alerts {
		t.Errorf("%d incident ids in --alerts, summary says %d", len(ids), s.Alerts)
	}
}

// TestReplayStdinAndTruth: "-" reads standard input and gives the same
// result as the file; --truth adds the metrics, computed from the alerts.
// The truth is made by hand around the alerts the replay writes: episode
// a spans the start of the first incident, episode b lies after the log,
// so exactly one episode is detected, by that incident, and every other
// incident starting away from a, or in another unit, is false (the strict
// scoring rule of evaluate.Compute, applied here by hand).
func TestReplayStdinAndTruth(t *testing.T) {
	p, _ := demoLog(t, 6)
	data, _ := os.ReadFile(p)
	alertsFile := filepath.Join(t.TempDir(), "alerts.jsonl")
	if code, _, errs := runCLI(t, "", "replay", "--quiet", "--alerts", alertsFile, p); code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	recs := lastRevisions(t, alertsFile)
	var firstID string
	var firstStart time.Time
	for id, r := range recs {
		if r.Kind == "flood" || r.Kind == "notice" { // a notice is no alert
			continue
		}
		if firstID == "" || r.Start.Before(firstStart) || (r.Start.Equal(firstStart) && id < firstID) {
			firstID, firstStart = id, r.Start
		}
	}
	if firstID == "" {
		t.Fatal("the 6-hour demo log raised no incident: the truth would have nothing to detect")
	}
	// Episode a names a channel of the first incident's unit (scoring is
	// strict: only an alert of the unit holding the episode's channels
	// detects it).
	first := recs[firstID]
	aChannel := first.Unit + ".x"
	if len(first.Contributors) > 0 {
		aChannel = first.Contributors[0].Channel
	} else if first.Quality != nil {
		aChannel = first.Quality.Channel
	}
	aStart, aEnd := firstStart.Add(-10*time.Minute), firstStart.Add(time.Minute)
	truth := filepath.Join(t.TempDir(), "truth.json")
	os.WriteFile(truth, []byte(fmt.Sprintf(`{"episodes":[
		{"id":"a","start":%q,"end":%q,"kind":"bias","channels":[%q]},
		{"id":"b","start":"2026-03-05T03:00:00Z","end":"2026-03-05T05:00:00Z","kind":"bias","channels":[%q]}]}`,
		aStart.Format(time.RFC3339Nano), aEnd.Format(time.RFC3339Nano), aChannel, aChannel)), 0o644)
	code, fromFile, errs := runCLI(t, "", "replay", "--quiet", "--json", "--truth", truth, p)
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	code, fromStdin, errs := runCLI(t, string(data), "replay", "--quiet", "--json", "--truth", truth, "-")
	if code != ExitOK {
		t.Fatalf("stdin: exit %d: %s", code, errs)
	}
	a, b := decodeSummary(t, fromFile), decodeSummary(t, fromStdin)
	if a.Frames != b.Frames || a.Alerts != b.Alerts || a.Lines.Accepted != b.Lines.Accepted {
		t.Errorf("file and stdin differ: %d/%d frames, %d/%d alerts", a.Frames, b.Frames, a.Alerts, b.Alerts)
	}
	m := a.Metrics
	if m == nil || m.Episodes != 2 || m.Detected != 1 || len(m.Matches) != 2 {
		t.Fatalf("metrics %+v, want 2 episodes and 1 detected", m)
	}
	if m.Matches[0].Alert != firstID || m.Matches[0].DelayS == nil || *m.Matches[0].DelayS != firstStart.Sub(aStart).Seconds() {
		t.Errorf("episode a: matched %+v, want alert %s after %v s", m.Matches[0], firstID, firstStart.Sub(aStart).Seconds())
	}
	if m.Matches[1].Alert != "" {
		t.Errorf("episode b, after the log, matched alert %s", m.Matches[1].Alert)
	}
	wantFalse := 0 // incidents outside episode a ± grace or of another unit
	for _, r := range recs {
		if r.Kind != "flood" && r.Kind != "notice" && (r.Unit != first.Unit || r.Start.Before(aStart.Add(-evaluate.DefaultGrace)) || r.Start.After(aEnd.Add(evaluate.DefaultGrace))) {
			wantFalse++
		}
	}
	if m.FalseAlerts != wantFalse {
		t.Errorf("%d false alerts, want %d (incidents of another unit or starting outside episode a ± %v)", m.FalseAlerts, wantFalse, evaluate.DefaultGrace)
	}
	if m.FalseAlertsPerDay == nil {
		t.Fatal("false_alerts_per_day missing")
	}
	// The per-day rate is false alerts over the span of the replay (6 h).
	if got, want := *m.FalseAlertsPerDay, float64(m.FalseAlerts)/0.25; got < want*0.99 || got > want*1.01 {
		t.Errorf("false_alerts_per_day %g, want %g", got, want)
	}
	// Per unit: every unit of the replay, its alerts adding up to the
	// summary's, the open share a fraction, the longest alert within the
	// 6 h replay.
	if len(m.Units) != len(a.Units) {
		t.Fatalf("metrics.units %+v for %d units", m.Units, len(a.Units))
	}
	total, falseN := 0, 0
	for _, u := range m.Units {
		total += u.Alerts
		falseN += u.FalseAlerts
		if u.AlertOpenShareNormal == nil || *u.AlertOpenShareNormal < 0 || *u.AlertOpenShareNormal > 1 || u.LongestOpenAlertS > 6*3600 {
			t.Errorf("unit %+v", u)
		}
	}
	if total != a.Alerts || falseN != m.FalseAlerts {
		t.Errorf("units hold %d alerts, %d false; the summary says %d, %d", total, falseN, a.Alerts, m.FalseAlerts)
	}
	if !strings.Contains(fromFile, `"alert_open_share_normal"`) || !strings.Contains(fromFile, `"longest_open_alert_s"`) {
		t.Error("replay --json lacks the per-unit keys")
	}
}

func TestReplayUsage(t *testing.T) {
	if code, _, errs := runCLI(t, "", "replay"); code != ExitUsage || !strings.Contains(errs, "no input") {
		t.Errorf("exit %d %q", code, errs)
	}
	if code, _, errs := runCLI(t, "", "replay", "--model", "nope.json", "x.lp"); code != ExitUsage || !strings.Contains(errs, "--model") {
		t.Errorf("exit %d %q", code, errs)
	}
	if code, _, errs := runCLI(t, "", "replay", "--alpha", "0.9", "x.lp"); code != ExitUsage || !strings.Contains(errs, "--alpha") {
		t.Errorf("exit %d %q", code, errs)
	}
	if code, _, errs := runCLI(t, "", "replay", filepath.Join(t.TempDir(), "missing.lp")); code != ExitFailure || !strings.Contains(errs, "no such file") {
		t.Errorf("exit %d %q", code, errs)
	}
	if code, _, errs := runCLI(t, "", "fit", "x.lp"); code != ExitUsage || !strings.Contains(errs, "--out") {
		t.Errorf("exit %d %q", code, errs)
	}
}

// fitDemo fits the demo plant's first hours (invented data) with the
// default settings into a model file in a temporary directory and returns
// the log, the model file and fit's summary; a failed fit ends the test.
func fitDemo(t *testing.T, hours int) (log, model, summary string) {
	t.Helper()
	log, _ = demoLog(t, hours)
	model = filepath.Join(t.TempDir(), "model.json")
	code, out, errs := runCLI(t, "", "fit", "--quiet", "--out", model, log)
	if code != ExitOK {
		t.Fatalf("fit: exit %d: %s", code, errs)
	}
	return log, model, out
}

// TestReplayModelFixesSettings: with --model, a fitted unit keeps the
// model settings it was fitted with (its tracker state is valid only under
// them), so --halflife and --alpha do not change its scores; replay says
// so for each such flag on standard error instead of dropping it silently,
// while an alarm flag (--on-delay) is not named. Without
// --model nothing is said. Invented data (the demo plant's first 12 h).
func TestReplayModelFixesSettings(t *testing.T) {
	if testing.Short() {
		t.Skip("fits the demo plant's first 12 h")
	}
	p, model, _ := fitDemo(t, 12)
	dir := filepath.Dir(model)
	scores := func(args ...string) (string, string) {
		out := filepath.Join(dir, "scores.lp")
		code, _, errs := runCLI(t, "", append([]string{"replay", "--quiet", "--scores", out, "--model", model, p}, args...)...)
		if code != ExitOK {
			t.Fatalf("replay %v: exit %d: %s", args, code, errs)
		}
		b, err := os.ReadFile(out)
		if err != nil {
			t.Fatal(err)
		}
		return string(b), errs
	}
	plain, errs := scores()
	if strings.Contains(errs, "applies only to units") {
		t.Errorf("no model flag given, yet: %s", errs)
	}
	flagged, errs := scores("--halflife", "1d", "--alpha", "0.001")
	for _, f := range []string{"--halflife", "--alpha"} {
		if !strings.Contains(errs, "replay: "+f+" applies only to units the model file") {
			t.Errorf("stderr does not name %s: %q", f, errs)
		}
	}
	if _, errs := scores("--on-delay", "5/8"); strings.Contains(errs, "applies only to units") {
		t.Errorf("an alarm flag was named as fixed by the model file: %q", errs)
	}
	// The claim itself: the fitted units' scores (T², SPE, limits) are the
	// same without and with those flags.
	if plain != flagged {
		t.Error("--halflife/--alpha changed the scores of the model file's units")
	}
	if code, _, errs := runCLI(t, "", "replay", "--quiet", "--halflife", "1d", p); code != ExitOK || strings.Contains(errs, "applies only to units") {
		t.Errorf("without --model: exit %d, %q", code, errs)
	}
	// The same settings from a configuration file are named too, once
	// each, with the units and both values; a flag given as well is named
	// as a flag only, and the scores stay those of the fitted settings.
	cfg := filepath.Join(dir, "fixed.yaml")
	if err := os.WriteFile(cfg, []byte("model:\n  alpha: 0.002\n  halflife: 2d\nunits:\n  - name: air\n    model: {warmup: 300}\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	configured, errs := scores("--config", cfg, "--halflife", "1d")
	for _, want := range []string{
		"replay: model.alpha 0.002 in the configuration does not apply to unit(s) air, chill, coolwater, steam of the model file " + model + ": they keep 0.01, the value they were fitted with",
		"replay: model.warmup 300 in the configuration does not apply to unit(s) air of the model file",
		"replay: --halflife applies only to units the model file",
	} {
		if !strings.Contains(errs, want) {
			t.Errorf("stderr lacks %q:\n%s", want, errs)
		}
	}
	if strings.Contains(errs, "model.halflife") {
		t.Errorf("halflife named from the configuration although its flag was given:\n%s", errs)
	}
	if configured != plain {
		t.Error("the configuration's model settings changed the scores of the model file's units")
	}
}

// scoreLine is one line of a --scores file.
type scoreLine struct {
	unit   string
	fields map[string]lineprotocol.Value
	time   time.Time
}

// readScores decodes every line of the --scores file at path; a line that
// is not a modewatch_scores line led by its unit tag ends the test.
func readScores(t testing.TB, path string) []scoreLine {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var lines []scoreLine
	dec := lineprotocol.NewDecoder(bufio.NewReader(f))
	for dec.Next() {
		m, err := dec.Measurement()
		if err != nil || string(m) != "modewatch_scores" {
			t.Fatalf("measurement %q, %v", m, err)
		}
		k, v, err := dec.NextTag()
		if err != nil || string(k) != "unit" {
			t.Fatalf("tag %q=%q, %v", k, v, err)
		}
		l := scoreLine{unit: string(v)}
		for k, _, err := dec.NextTag(); k != nil || err != nil; k, _, err = dec.NextTag() {
			if err != nil {
				t.Fatal(err)
			}
		}
		l.fields = lineFields(t, dec)
		if l.time, err = dec.Time(lineprotocol.Nanosecond, time.Time{}); err != nil {
			t.Fatal(err)
		}
		lines = append(lines, l)
	}
	return lines
}

// lineFields reads the remaining fields of the decoder's current line
// (after its measurement and tags) by name.
func lineFields(t testing.TB, dec *lineprotocol.Decoder) map[string]lineprotocol.Value {
	t.Helper()
	fields := map[string]lineprotocol.Value{}
	for {
		k, v, err := dec.NextField()
		if err != nil {
			t.Fatal(err)
		}
		if k == nil {
			return fields
		}
		fields[string(k)] = v
	}
}

// TestFitBudget: fit on the demo plant's first 24 h (invented data)
// calibrates every unit to the default budget: the model file carries a
// scale above 0 and an interval around the budget, the summary prints the
// calibrated limits and, since one day is far too short for one alert a
// week, the days of normal log needed; with alerts.budget negative the
// model has no calibration (fit --json).
func TestFitBudget(t *testing.T) {
	if testing.Short() {
		t.Skip("fits a day of the demo plant three times")
	}
	p, model, out := fitDemo(t, 24)
	dir := filepath.Dir(model)
	if !strings.Contains(out, "budget 0.25 false alerts/day: limits ×") || !strings.Contains(out, "days of normal log needed") ||
		!strings.Contains(out, "a week of normal running should bring 0 to ") {
		t.Errorf("summary lacks the calibration, the week's predictive interval or the too-short warning:\n%s", out)
	}
	if !strings.Contains(out, "spike sizes (most spikes of the normal log within 1h0m0s): ") {
		t.Errorf("summary lacks the learned spike sizes:\n%s", out)
	}
	mf, err := pipeline.ReadModel(model)
	if err != nil {
		t.Fatal(err)
	}
	for _, u := range mf.Units {
		c := u.Calibration
		if c == nil {
			t.Errorf("unit %s: no calibration", u.Name)
			continue
		}
		if !(c.Scale > 0) || !(c.RateLow <= c.Budget && c.Budget <= c.RateHigh) || c.Blocks < 20 || c.DaysNeeded <= 1 {
			t.Errorf("unit %s: calibration %+v", u.Name, *c)
		}
		// The model file keeps the week's predictive interval, the same
		// as Predict gives from the rate and its standard error.
		if w := c.Predict(pipeline.PredictWeekDays); c.Week == nil || *c.Week != w || !(c.RateSE > 0) || w.Low != 0 || w.High < 2 {
			t.Errorf("unit %s: week %+v, Predict(7) %+v, rate SE %g", u.Name, c.Week, w, c.RateSE)
		}
	}
	cfg := filepath.Join(dir, "off.yaml")
	if err := os.WriteFile(cfg, []byte("alerts:\n  budget: -1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, errs := runCLI(t, "", "fit", "--quiet", "--json", "--config", cfg, "--out", filepath.Join(dir, "off.json"), p)
	if code != ExitOK {
		t.Fatalf("fit with the budget off: exit %d: %s", code, errs)
	}
	var o struct {
		Units []struct {
			Calibration *pipeline.Calibration `json:"calibration"`
		} `json:"units"`
	}
	if err := json.Unmarshal([]byte(out), &o); err != nil || len(o.Units) == 0 {
		t.Fatalf("fit --json: %v\n%s", err, out)
	}
	for i, u := range o.Units {
		if u.Calibration != nil {
			t.Errorf("unit %d calibrated with alerts.budget off", i)
		}
	}
}

// Published PCA detection rates on d01_te … d21_te, samples 161–960, with
// 11 components fitted on rows 21–500 of d00.dat and each limit at 1 %
// false alarms on d00_te.dat (Russell, Chiang & Braatz 2000, Table (PCA);
// recalled, confirmed by reproduction — tracker/testdata/tep/PUBLISHED.md),
// kept in tepdata.
var (
	tepT2 = tepdata.PublishedT2
	tepQ  = tepdata.PublishedQ
)

// tepNames are the 52 variables in file order (SOURCE.md, "Format").
func tepNames() []string { return tepdata.Names() }

// readTEP reads a Tennessee Eastman file from tracker/testdata/tep through
// tepdata, failing the test on any error.
func readTEP(t *testing.T, name string) [][]float64 {
	t.Helper()
	rows, err := tepdata.Load(name)
	if err != nil {
		t.Fatal(err)
	}
	return rows
}

// tepStart is the (invented) time of the first sample of every file.
var tepStart = time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)

// writeTEPLog writes rows as line protocol with the lineprotocol Encoder:
// one line per sample, measurement "tep", one field per variable, samples
// 180 s apart (SOURCE.md: 3-minute sampling).
func writeTEPLog(t *testing.T, path string, rows [][]float64) {
	t.Helper()
	names := tepNames()
	var enc lineprotocol.Encoder
	for k, r := range rows {
		enc.StartLine("tep")
		for i, v := range r {
			enc.AddField(names[i], lineprotocol.MustNewValue(v))
		}
		enc.EndLine(tepStart.Add(time.Duration(k) * 180 * time.Second))
	}
	if err := enc.Err(); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, enc.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
}

// tepScores reads a --scores file and returns, per sample (in time order),
// whether T² and SPE exceeded their limits.
func tepScores(t *testing.T, path string, n int) (t2, spe []bool) {
	t.Helper()
	t2, spe = make([]bool, n), make([]bool, n)
	seen := make([]bool, n)
	for _, l := range readScores(t, path) {
		f := map[string]float64{}
		for k, v := range l.fields {
			if v.Kind() == lineprotocol.Float {
				f[k] = v.FloatV()
			}
		}
		k := int(l.time.Sub(tepStart) / (180 * time.Second))
		if k < 0 || k >= n {
			t.Fatalf("score at %v outside the %d samples", l.time, n)
		}
		for _, key := range []string{"t2", "t2_limit", "spe", "spe_limit"} {
			if _, ok := f[key]; !ok {
				t.Fatalf("sample %d: score line without %s", k+1, key)
			}
		}
		seen[k] = true
		t2[k] = f["t2"] > f["t2_limit"]
		spe[k] = f["spe"] > f["spe_limit"]
	}
	for k, ok := range seen {
		if !ok {
			t.Fatalf("no score for sample %d", k+1)
		}
	}
	return t2, spe
}

// TestTennesseeEastmanCommands runs the Tennessee Eastman benchmark through
// the commands, in-process: the .dat files become line protocol, "fit"
// learns 11 dense modes from rows 21–500 of d00.dat with equal weights,
// and "replay --model --adapt=false --limits empirical:d00_te" scores each
// fault test set, writing --scores. The share of samples 161–960 whose T²
// (SPE) exceeds its limit must match the published PCA detection rates
// within 0.005 for all 21 faults, as the tracker-level test
// (tracker/tep_test.go) does on the same data.
func TestTennesseeEastmanCommands(t *testing.T) {
	dir := t.TempDir()
	train := readTEP(t, "d00.dat")
	if len(train) != 500 {
		t.Fatalf("d00.dat: %d observations, want 500", len(train))
	}
	trainLog := filepath.Join(dir, "d00_rows21-500.lp")
	writeTEPLog(t, trainLog, train[20:500])
	normalLog := filepath.Join(dir, "d00_te.lp")
	writeTEPLog(t, normalLog, readTEP(t, "d00_te.dat"))
	model := filepath.Join(dir, "tep.model")
	if code, _, errs := runCLI(t, "", "fit", "--quiet", "--sparsity", "none", "--modes", "11", "--out", model, trainLog); code != ExitOK {
		t.Fatalf("fit: exit %d: %s", code, errs)
	}
	mf, err := pipeline.ReadModel(model)
	if err != nil {
		t.Fatal(err)
	}
	if len(mf.Units) != 1 || len(mf.Units[0].Channels) != 52 || len(mf.Units[0].Modes) != 11 || mf.Frames != 480 {
		t.Fatalf("model: %d units, frames %d", len(mf.Units), mf.Frames)
	}

	replay := func(name string) (t2, spe []bool) {
		lp := filepath.Join(dir, name+".lp")
		if name != "d00_te" {
			writeTEPLog(t, lp, readTEP(t, name+".dat"))
		}
		scores := filepath.Join(dir, name+".scores")
		code, _, errs := runCLI(t, "", "replay", "--quiet", "--model", model, "--adapt=false",
			"--limits", "empirical:"+normalLog, "--scores", scores, lp)
		if code != ExitOK {
			t.Fatalf("replay %s: exit %d: %s", name, code, errs)
		}
		return tepScores(t, scores, 960)
	}
	rate := func(x []bool, from int) float64 {
		n := 0
		for _, v := range x[from:] {
			if v {
				n++
			}
		}
		return float64(n) / float64(len(x)-from)
	}

	// On the reference log itself the limit is the 10th-largest of the
	// same 960 values, so "at most 1 %" would hold by construction. What
	// the command path can get wrong is the construction (another order
	// statistic, frames lost or scored differently on the way): exactly 9
	// of the 960 frames must be above the limit.
	t2, spe := replay("d00_te")
	for _, s := range []struct {
		name string
		over []bool
	}{{"T²", t2}, {"SPE", spe}} {
		if n := math.Round(rate(s.over, 0) * 960); len(s.over) != 960 || n != 9 {
			t.Errorf("d00_te: %v of %d frames above the %s limit set at their 10th-largest, want exactly 9 of 960", n, len(s.over), s.name)
		}
	}
	var b strings.Builder
	fmt.Fprintf(&b, "fault | T² published | T² commands | SPE published | SPE commands\n")
	for f := 1; f <= 21; f++ {
		t2, spe := replay(fmt.Sprintf("d%02d_te", f))
		r0, r1 := rate(t2, 160), rate(spe, 160)
		fmt.Fprintf(&b, "%5d | %.3f | %.3f | %.3f | %.3f\n", f, tepT2[f-1], r0, tepQ[f-1], r1)
		// Within 0.005 inclusive (1e-9 for the binary representation of
		// the decimals). Fault 21 sits at the edge for SPE, 0.435 against
		// 0.430 (4 of 800 samples): it fixes the stream 4 valve, so XMV(4)
		// repeats one value for 801 samples, and the command path's
		// flat-line rule (60 identical frames, tracker.DefaultFlatFrames)
		// takes that channel out of the model as stuck, where the
		// tracker-level test switches the rule off.
		if !scalar.EqualWithinAbs(r0, tepT2[f-1], 0.005+1e-9) {
			t.Errorf("fault %d: T² detection %.3f, published %.3f", f, r0, tepT2[f-1])
		}
		if !scalar.EqualWithinAbs(r1, tepQ[f-1], 0.005+1e-9) {
			t.Errorf("fault %d: SPE detection %.3f, published %.3f", f, r1, tepQ[f-1])
		}
	}
	t.Log("\n" + b.String())
}

// TestFitCalibrationFolds: with alerts.calibration_folds 2, fit scores
// every frame of the normal log once, each half by a model learned on the
// other (cross-fitting), so each unit's calibration holds out the whole
// day of the demo plant's first 24 h (invented data); by default it holds
// out the second half only.
func TestFitCalibrationFolds(t *testing.T) {
	dir := t.TempDir()
	p, _ := demoLog(t, 24)
	cfg := filepath.Join(dir, "folds.yaml")
	if err := os.WriteFile(cfg, []byte("alerts:\n  calibration_folds: 2\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name   string
		args   []string
		lo, hi float64 // held-out days
	}{
		{"default", nil, 0.45, 0.55},
		{"two folds", []string{"--config", cfg}, 0.95, 1.01},
	} {
		t.Run(c.name, func(t *testing.T) {
			model := filepath.Join(dir, c.name+".json")
			args := append([]string{"fit", "--quiet", "--out", model}, c.args...)
			if code, _, errs := runCLI(t, "", append(args, p)...); code != ExitOK {
				t.Fatalf("fit: exit %d: %s", code, errs)
			}
			mf, err := pipeline.ReadModel(model)
			if err != nil || len(mf.Units) == 0 {
				t.Fatalf("model: %v", err)
			}
			for _, u := range mf.Units {
				if cal := u.Calibration; cal == nil || cal.HeldOutDays < c.lo || cal.HeldOutDays > c.hi || !(cal.Scale > 0) {
					t.Errorf("unit %s: calibration %+v, want %.2f to %.2f held-out days", u.Name, cal, c.lo, c.hi)
				}
			}
		})
	}
}

// TestFitCalibrationUnweighed: fit's held-out calibration scores the
// held-out part of the normal log without the persistence weight
// (model.persist), as fit learns the part before it: the whole log is
// normal by the user's word. So the weight changes no unit's scale, and
// every unit of the demo plant's first day is calibrated with it on.
// Weighed, the held-out half's first visit to an air header setpoint the
// first 12 h did not show stayed refused to its end, and unit air was
// left uncalibrated (its block maxima gave no regular GEV fit). Invented
// data (the demo plant's first 24 h).
func TestFitCalibrationUnweighed(t *testing.T) {
	if testing.Short() {
		t.Skip("fits a day of the demo plant twice")
	}
	p, _ := demoLog(t, 24)
	dir := t.TempDir()
	scales := func(k string) map[string]float64 {
		cfg := filepath.Join(dir, k+".yaml")
		if err := os.WriteFile(cfg, []byte("model:\n  persist: "+k+"\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		model := filepath.Join(dir, k+".json")
		code, _, errs := runCLI(t, "", "fit", "--quiet", "--config", cfg, "--out", model, p)
		if code != ExitOK {
			t.Fatalf("fit with persist %s: exit %d: %s", k, code, errs)
		}
		if strings.Contains(errs, "not calibrated") {
			t.Errorf("persist %s: %s", k, errs)
		}
		mf, err := pipeline.ReadModel(model)
		if err != nil {
			t.Fatal(err)
		}
		out := map[string]float64{}
		for _, u := range mf.Units {
			if u.Calibration == nil {
				t.Errorf("persist %s: unit %s not calibrated", k, u.Name)
				continue
			}
			out[u.Name] = u.Calibration.Scale
		}
		return out
	}
	off, on := scales("-1"), scales("3.5")
	if len(off) != 4 || len(on) != len(off) {
		t.Fatalf("calibrated units: %v without the weight, %v with it", off, on)
	}
	for name, s := range off {
		if on[name] != s {
			t.Errorf("unit %s: scale ×%g with the weight, ×%g without", name, on[name], s)
		}
	}
}
