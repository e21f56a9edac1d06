package configs

import (
	"reflect"
	"strconv"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/tracker"
	"modewatch/tracker/modes"
)

// TestSettingDefaults checks that each setting's default is the constant
// of the package that owns it, and that reading that default through the
// setting gives exactly the value the configuration fills in.
func TestSettingDefaults(t *testing.T) {
	owner := map[string]string{
		"sparsity":             DefaultSparsity,
		"modes":                DefaultModes,
		"halflife":             "7d", // DefaultHalfLife
		"alpha":                strconv.FormatFloat(tracker.DefaultAlpha, 'g', -1, 64),
		"warmup":               strconv.Itoa(tracker.DefaultWarmUp),
		"refresh_every":        strconv.Itoa(tracker.DefaultRefreshEvery),
		"on_delay":             strconv.Itoa(alerts.DefaultOnCount) + "/" + strconv.Itoa(alerts.DefaultOnWindow),
		"on_span":              "", // alerts.DefaultOnSpan, applied by the engine
		"off_delay":            FormatDuration(alerts.DefaultOffDelay),
		"deadband":             strconv.FormatFloat(alerts.DefaultDeadband, 'g', -1, 64),
		"adapt":                "true",
		"limits":               LimitsTheory,
		"smoothing":            "", // no smoothing
		"statistics":           DefaultStatistics,
		"mewma_lambda":         strconv.FormatFloat(tracker.DefaultMewmaLambda, 'g', -1, 64),
		"creep_lambda":         strconv.FormatFloat(tracker.DefaultCreepLambda, 'g', -1, 64),
		"state_scoring":        tracker.DefaultStateScoring,
		"new_point":            strconv.FormatBool(alerts.DefaultNewPoint),
		"new_point_res":        strconv.FormatBool(alerts.DefaultPointByResidual),
		"calibrate_points":     strconv.FormatBool(DefaultCalibratePoints),
		"spread_restarts_hold": strconv.FormatBool(alerts.DefaultSpreadRestartsHold),
		"driver_level":         strconv.FormatFloat(tracker.DefaultDriverLevel, 'g', -1, 64),
		"level_shift":          strconv.FormatBool(DefaultLevelShift),
		"level_window":         FormatDuration(DefaultLevelWindow),
	}
	if DefaultHalfLife != 7*24*time.Hour {
		t.Fatalf("DefaultHalfLife = %v; the table above says 7d", DefaultHalfLife)
	}
	if len(owner) != len(Settings()) {
		t.Fatalf("%d settings, %d owners listed", len(Settings()), len(owner))
	}
	dm, da := DefaultModel(), DefaultAlerts()
	for _, st := range Settings() {
		t.Run(st.Name, func(t *testing.T) {
			want, ok := owner[st.Name]
			if !ok {
				t.Fatalf("no owner listed for %s", st.Name)
			}
			if st.Default != want {
				t.Fatalf("Default = %q, owning package's %q", st.Default, want)
			}
			if st.Default == "" {
				return
			}
			var o Overrides
			text, err := st.Parse(&o, st.Default)
			if err != nil {
				t.Fatalf("the default %q does not parse: %v", st.Default, err)
			}
			if text != st.Default {
				t.Errorf("the default %q is not in normal form (%q)", st.Default, text)
			}
			// The parsed default laid over the configuration's defaults
			// changes nothing, and it does set a field.
			if m := o.Model.Over(dm); !reflect.DeepEqual(m, dm) {
				t.Errorf("model with %s's default = %+v, configuration default %+v", st.Name, m, dm)
			}
			if a := o.Alerts.Over(da); !reflect.DeepEqual(a, da) {
				t.Errorf("alerts with %s's default = %+v, configuration default %+v", st.Name, a, da)
			}
			if reflect.DeepEqual(o, Overrides{}) {
				t.Errorf("parsing %q set no field", st.Default)
			}
		})
	}
	// warmup: the tracker's own zero value means the same default.
	tr, err := tracker.New(4, tracker.Config{Modes: modes.Config{Count: 1}})
	if err != nil {
		t.Fatal(err)
	}
	if got := tr.Config().WarmUp; got != dm.WarmUp {
		t.Errorf("tracker warm-up %d, configuration default %d", got, dm.WarmUp)
	}
}

// TestSettingNames checks that every setting has a section, a doc line and
// is found by its grid key and by its flag name.
func TestSettingNames(t *testing.T) {
	for _, st := range Settings() {
		if st.Section != "model" && st.Section != "alerts" {
			t.Errorf("%s: section %q", st.Name, st.Section)
		}
		if st.Doc == "" {
			t.Errorf("%s: no doc", st.Name)
		}
		if LookupSetting(st.Name) == nil || LookupSetting(st.Flag()) == nil {
			t.Errorf("%s: not found by name or flag %q", st.Name, st.Flag())
		}
		if st.Model && st.Section != "model" {
			t.Errorf("%s: changes the model but lives in %s", st.Name, st.Section)
		}
	}
	if LookupSetting("nonesuch") != nil {
		t.Error("an unknown name was found")
	}
}

// fillNonZero sets every field reachable from v (settable) to a value
// other than its zero value.
func fillNonZero(v reflect.Value) {
	switch v.Kind() {
	case reflect.String:
		v.SetString("set")
	case reflect.Int, reflect.Int64:
		v.SetInt(7)
	case reflect.Float64:
		v.SetFloat(0.25)
	case reflect.Bool:
		v.SetBool(true)
	case reflect.Pointer:
		v.Set(reflect.New(v.Type().Elem()))
		fillNonZero(v.Elem())
	case reflect.Struct:
		for i := range v.NumField() {
			fillNonZero(v.Field(i))
		}
	case reflect.Slice:
		v.Set(reflect.MakeSlice(v.Type(), 1, 1))
		fillNonZero(v.Index(0))
	default:
		panic("fillNonZero: no value for kind " + v.Kind().String())
	}
}

// TestOverEveryField: a unit's model and alarm settings with no field set
// take every field from the settings below them, an empty severity list
// included; a field that is set is kept.
func TestOverEveryField(t *testing.T) {
	var fullM Model
	fillNonZero(reflect.ValueOf(&fullM).Elem())
	if got := (Model{}).Over(fullM); !reflect.DeepEqual(got, fullM) {
		t.Errorf("empty model over a full one = %+v, want %+v", got, fullM)
	}
	if got := fullM.Over(DefaultModel()); !reflect.DeepEqual(got, fullM) {
		t.Errorf("full model over the defaults = %+v, want it unchanged", got)
	}
	var fullA Alerts
	fillNonZero(reflect.ValueOf(&fullA).Elem())
	if got := (Alerts{Severity: []SeverityBand{}}).Over(fullA); !reflect.DeepEqual(got, fullA) {
		t.Errorf("empty alarm settings over full ones = %+v, want %+v", got, fullA)
	}
	if got := fullA.Over(DefaultAlerts()); !reflect.DeepEqual(got, fullA) {
		t.Errorf("full alarm settings over the defaults = %+v, want them unchanged", got)
	}
	// One field set, the rest inherited.
	got := Model{WarmUp: 42}.Over(fullM)
	want := fullM
	want.WarmUp = 42
	if !reflect.DeepEqual(got, want) {
		t.Errorf("model with warmup 42 over a full one = %+v, want %+v", got, want)
	}
}

func TestParseStatistics(t *testing.T) {
	for _, c := range []struct {
		in   string
		want Statistics
		ok   bool
	}{
		{"t2,spe,phi", Statistics{T2: true, SPE: true, Phi: true}, true},
		{" RES , var", Statistics{Residual: true, Variance: true}, true},
		{"t2,spe,phi,res,mewma", Statistics{T2: true, SPE: true, Phi: true, Residual: true, Mewma: true}, true},
		{"t2,spe,phi,res,creep", Statistics{T2: true, SPE: true, Phi: true, Residual: true, Creep: true}, true},
		{"", Statistics{}, false},
		{"t2,q", Statistics{}, false},
		{"t2,ewma", Statistics{}, false},
	} {
		got, err := ParseStatistics(c.in)
		if (err == nil) != c.ok || (c.ok && got != c.want) {
			t.Errorf("%q: %+v, %v", c.in, got, err)
		}
		if err != nil && (!strings.Contains(err.Error(), "mewma") || !strings.Contains(err.Error(), "creep")) {
			t.Errorf("%q: error %q does not list the choices", c.in, err)
		}
	}
}

// model.mewma_lambda and a statistics list with mewma are checked at their
// keys, at the top level and per unit.
func TestMewmaValidation(t *testing.T) {
	for _, c := range []struct {
		yaml, want string
	}{
		{"model: {statistics: \"t2,spe,phi,res,mewma\", mewma_lambda: 0.1}\n", ""},
		{"model: {mewma_lambda: 0}\n", ""}, // default
		{"model: {mewma_lambda: 1.5}\n", "model.mewma_lambda"},
		{"model: {mewma_lambda: -0.1}\n", "model.mewma_lambda"},
		{"model: {mewma_lambda: 1}\n", "model.mewma_lambda"},
		{"model: {statistics: \"t2,mewmaa\"}\n", "model.statistics"},
		{"model: {statistics: \"t2,spe,phi,res,creep\", creep_lambda: 0.1}\n", ""},
		{"model: {creep_lambda: 1}\n", "model.creep_lambda"},
		{"model: {creep_lambda: -0.2}\n", "model.creep_lambda"},
		{"units: [{name: a, model: {creep_lambda: 2}}]\n", "creep_lambda"},
		{"units: [{name: a, model: {mewma_lambda: 2}}]\n", "mewma_lambda"},
		{"model: {level_shift: false, level_window: 10m}\n", ""},
		{"model: {level_window: -5m}\n", "model.level_window"},
		{"units: [{name: a, model: {level_window: -1s}}]\n", "level_window"},
	} {
		checkKeyError(t, c.yaml, c.want)
	}
}
