package configs_test

import (
	"strings"
	"testing"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker"
)

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
