package configs_test

import (
	"fmt"
	"strings"
	"testing"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker"
)

// ExampleParse shows that every problem comes back at once, each with its
// file:line:column and key path.
func ExampleParse() {
	_, err := configs.Parse("plant.yaml", []byte(`
model:
  halflife: 2 days
  alpha: 0.01
alerts:
  on_delay: {n: 4, m: 2}
`))
	fmt.Println(err)
	// Output:
	// configs: 2 problem(s):
	// plant.yaml:3:13: model.halflife: duration "2 days": want e.g. 500ms, 15m, 1h30m or 7d
	// plant.yaml:6:13: alerts.on_delay: n=4 of m=2: want 1 ≤ n ≤ m
}

// ExampleConfig_ModelFor shows how a unit's settings inherit the defaults.
func ExampleConfig_ModelFor() {
	c, err := configs.Parse("plant.yaml", []byte(`
model: {sparsity: "l0:4"}
units:
  - name: boiler
    model: {halflife: 3d}
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	m := c.ModelFor("boiler")
	fmt.Println(m.Sparsity, m.HalfLife, m.Alpha, m.Modes)
	// Output: l0:4 72h0m0s 0.01 auto:0.8
}

// TestExampleStatesDefaults: the shipped example configuration writes out
// the defaults of the settings below so that an operator sees them; each
// must be the constant of the package that owns the default, so that a
// default chosen again is not left behind in the example (each default is
// declared once, in its owner; the pipeline's own defaults are checked in
// its package, TestExampleStatesPipelineDefaults).
func TestExampleStatesDefaults(t *testing.T) {
	c, err := configs.Load("modewatch.yaml")
	if err != nil {
		t.Fatal(err)
	}
	a, m := c.Alerts, c.Model
	for _, x := range []struct {
		name      string
		got, want any
	}{
		{"alerts.budget", a.Budget, configs.DefaultBudget},
		{"alerts.off_delay", a.OffDelay, alerts.DefaultOffDelay},
		{"alerts.deadband", a.Deadband, alerts.DefaultDeadband},
		{"alerts.accept_after", a.AcceptAfter, alerts.DefaultAcceptAfter},
		{"alerts.location_quiet", a.LocationQuiet, alerts.DefaultLocationQuiet},
		{"alerts.reopen_within", a.ReopenWithin, alerts.DefaultReopenWithin},
		{"alerts.specific_share", a.SpecificShare, alerts.DefaultSpecificShare},
		{"model.state_scoring", m.StateScoring, tracker.DefaultStateScoring},
		{"model.alpha", m.Alpha, tracker.DefaultAlpha},
	} {
		if x.got != x.want {
			t.Errorf("%s: the example writes %v, the default is %v", x.name, x.got, x.want)
		}
	}
	for _, st := range configs.Settings() {
		if st.Name == "on_span" {
			if want := "(default: " + configs.FormatDuration(alerts.DefaultOnSpan) + ")"; !strings.Contains(st.Doc, want) {
				t.Errorf("on_span doc %q does not state the engine's default %s", st.Doc, want)
			}
		}
	}
}
