package cli

import (
	"bytes"
	"context"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/service"
	"modewatch/configs"

	"go.yaml.in/yaml/v3"
)

// TestDemoRuns: the demo needs no configuration and no network (embedded
// server on a free loopback port, HTTP API on a free port if the default is
// taken), stops by itself with --duration, and says that it is advisory and
// which settings it runs with; --state-dir may name a folder not made yet.
func TestDemoRuns(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the demo for a few seconds")
	}
	code, out, errs := runCLI(t, "", "demo", "--duration", "3s", "--speed", "20000", "--state-dir", filepath.Join(t.TempDir(), "not", "there", "yet"))
	if code != ExitOK {
		t.Fatalf("exit %d\nstdout:\n%s\nstderr:\n%s", code, out, errs)
	}
	cfg, err := demoConfig("127.0.0.1:0", t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{
		"modewatch is advisory", "settings: the defaults (configs/demo.yaml only sets", demoSettings(cfg), "calibrated to alerts.budget",
		"1. fitted 4 units", "2. service running with an embedded NATS server at nats://127.0.0.1:",
		"/api/units", "3. publishing", "plant time", "4. scored", "F1-header-bias",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("demo output lacks %q:\n%s", want, out)
		}
	}
}

// TestDemoOutcome runs the whole demo (its four normal days fitted, both
// test days live) at a high speed-up and checks its outcome against the
// labelled faults of the demo plant, scored strictly (an alert counts only
// in the unit that holds the faulty sensor).
//
// The demo runs with the default detection settings (chosen on the
// realism suite, not on this plant) and each unit calibrated to the
// default alerts.budget (0.25 a day) on the normal days. Three live runs at
// 15000× each measured 5 of 7 detected (all but the F1 header bias and the
// F2 supply drift), 4 isolated in the top 3 and one false alert over the
// two days (the chill unit's residual at Mar 6 10:07; before frames were
// centred on the period grid: none, and with a budget of 0.5: 6, 6 and
// none). With the persistence weight, 6 detected and 6 isolated. With the
// level-shift rule (model.level_shift, on by default) a live run measured
// 6 detected, 6 isolated and two false alerts: the chill unit's at 10:07
// and a level shift of the air header pressure at Mar 6 18:02, a channel
// that follows a setpoint the plant does not publish (the offline suite's
// demo row has one of the same kind at 10:35). The bounds: detection
// below 5 or more than two false alerts (one per simulated day, the
// issue's target) is a change in the defaults' behaviour on this plant
// worth a look.
// The data and the faults are invented (sim); this is a check of the
// shipped demo, not a validation of the method.
func TestDemoOutcome(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the full demo (two simulated test days) at a high speed-up")
	}
	var out, errb bytes.Buffer
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	oc, err := runDemoWith(ctx, IO{In: strings.NewReader(""), Out: &out, Err: &errb},
		demoOptions{listen: "127.0.0.1:0", stateDir: t.TempDir(), speed: 15000, quiet: true})
	if err != nil {
		t.Fatalf("%v\nstdout:\n%s\nstderr:\n%s", err, out.String(), errb.String())
	}
	// 15000× sends a sample every 1.3 ms (4 messages); the demo
	// configuration's subscription queue (intake.queue, 262,144 messages)
	// bridges a stall of the service of about a minute.
	if oc.linesTaken != oc.linesSent {
		t.Errorf("the service received %d of %d lines (it could not keep up at this speed)", oc.linesTaken, oc.linesSent)
	}
	// Two days at 20 s are 8640 samples; the last frame or two may still
	// wait for later data when the publisher stops.
	if oc.frames < 8640-3 {
		t.Errorf("scored %d frames, want about 8640", oc.frames)
	}
	m := oc.metrics
	if m.Episodes != 7 || m.Detected < 5 {
		t.Errorf("detected %d of %d labelled faults, want at least 5 of 7", m.Detected, m.Episodes)
	}
	// Two false alerts over the two days (a frame or two short of 48 h)
	// are a little over one a day: the bound is the count.
	if m.FalseAlertsPerDay == nil || math.IsNaN(*m.FalseAlertsPerDay) || m.FalseAlerts > 2 {
		t.Errorf("%d false alerts over %s, want at most 2 (1 per simulated day)", m.FalseAlerts, oc.span)
	}
	if m.IsolatedTop3 < 4 {
		t.Errorf("%d faults isolated in the top 3, want at least 4", m.IsolatedTop3)
	}
	text := out.String()
	// The advisory caution opens and closes the output.
	if n := strings.Count(text, service.Caution); n != 2 {
		t.Errorf("the caution %q appears %d times, want 2 (first and last lines)", service.Caution, n)
	}
	for _, want := range []string{
		"the defaults, chosen on the realism suite", "4 calibrated to alerts.budget",
		"4. scored", "labelled faults started so far: 7, detected", "per simulated day",
	} {
		if !strings.Contains(text, want) {
			t.Errorf("demo output lacks %q", want)
		}
	}
	if t.Failed() {
		t.Logf("demo output:\n%s\nstderr:\n%s", text, errb.String())
	}
}

// TestDemoConfigCopyIdentical guards the rule that the embedded demo
// configuration and the shipped configs/demo.yaml are the same file, and
// that it loads as a service configuration with the demo plant's period.
func TestDemoConfigCopyIdentical(t *testing.T) {
	shipped, err := os.ReadFile(filepath.Join("..", "..", "..", "..", "configs", "demo.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(shipped, demoYAML) {
		t.Fatal("configs/demo.yaml and cmd/modewatch/internal/cli/demo.yaml differ; copy one onto the other")
	}
	dir := t.TempDir()
	cfg, err := demoConfig("127.0.0.1:0", dir)
	if err != nil {
		t.Fatal(err)
	}
	// Nothing may be written outside the demo's state directory.
	if cfg.StateDir != dir || !strings.HasPrefix(cfg.Delivery.SpoolDir, dir) {
		t.Errorf("state_dir %q, spool %q: want both under %q", cfg.StateDir, cfg.Delivery.SpoolDir, dir)
	}
	if cfg.Frames.Period != 20*time.Second || cfg.Server.EmbeddedPort != -1 {
		t.Errorf("period %s, embedded port %d", cfg.Frames.Period, cfg.Server.EmbeddedPort)
	}
	// No detection tuning: the demo runs with the default model and alarm
	// settings, which the realism suite chose (issue 11: the file keeps
	// only what the demo needs to run).
	var top map[string]any
	if err := yaml.Unmarshal(demoYAML, &top); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"model", "alerts", "units"} {
		if _, ok := top[k]; ok {
			t.Errorf("configs/demo.yaml sets %s: the demo runs with the default detection settings", k)
		}
	}
	def := &configs.Config{}
	def.ApplyDefaults()
	if got, want := demoSettings(cfg), demoSettings(def); got != want {
		t.Errorf("demo settings %q, defaults %q", got, want)
	}
}
