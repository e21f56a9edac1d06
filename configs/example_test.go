package configs_test

import (
	"fmt"
	"reflect"
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
		{"alerts.calibration_folds", a.CalibrationFolds, configs.DefaultCalibrationFolds},
		{"alerts.calibration_shape", a.CalibrationShape, configs.DefaultCalibrationShape},
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

// TestExampleWritesTheDefaults: the example's model and alerts sections
// (every unit's defaults) write out exactly the defaults: DefaultModel and
// DefaultAlerts, with each field whose zero means "the owning package's
// default" taken from that package, so that a default chosen again in code
// is not left behind in the example. The pipeline's own (resolution_floor,
// accept_weight) are checked in its package.
func TestExampleWritesTheDefaults(t *testing.T) {
	c, err := configs.Load("modewatch.yaml")
	if err != nil {
		t.Fatal(err)
	}
	m := configs.DefaultModel()
	m.Robust = tracker.DefaultRobust
	m.ResolutionFloor = c.Model.ResolutionFloor
	a := configs.DefaultAlerts()
	a.AcceptAfter, a.LocationQuiet, a.ReopenWithin = alerts.DefaultAcceptAfter, alerts.DefaultLocationQuiet, alerts.DefaultReopenWithin
	a.SpecificShare = alerts.DefaultSpecificShare
	a.AcceptWeight = c.Alerts.AcceptWeight
	// Unset, these switches mean: learn around an alert, an incident per
	// location, one budget scale, no scoring beyond the incidents.
	on, off := true, false
	a.LearnAroundAlert, a.IncidentsPerLocation, a.BudgetPerStatistic, a.BeyondIncidents = &on, &on, &off, &off
	for _, x := range []struct {
		section   string
		got, want any
	}{{"model", c.Model, m}, {"alerts", c.Alerts, a}} {
		g, w := reflect.ValueOf(x.got), reflect.ValueOf(x.want)
		for i := range g.NumField() {
			if !reflect.DeepEqual(g.Field(i).Interface(), w.Field(i).Interface()) {
				t.Errorf("%s.%s: the example writes %v, the default is %v", x.section, g.Type().Field(i).Name,
					fmtField(g.Field(i)), fmtField(w.Field(i)))
			}
		}
	}
}

// fmtField shows a settings field, the value behind a pointer.
func fmtField(v reflect.Value) any {
	if v.Kind() == reflect.Pointer && !v.IsNil() {
		return v.Elem().Interface()
	}
	return v.Interface()
}
