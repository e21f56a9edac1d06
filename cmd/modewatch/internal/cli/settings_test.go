package cli

import (
	"flag"
	"io"
	"reflect"
	"testing"

	"modewatch/cmd/modewatch/internal/tune"
	"modewatch/configs"
)

// TestSettingRoutesAgree sets each setting of configs.Settings to a
// value other than its default three ways (a configuration key written as
// the tune snippet writer writes it, a command-line flag, a tune grid key)
// and checks that the effective model and alarm settings are the same.
func TestSettingRoutesAgree(t *testing.T) {
	sample := map[string]string{
		"sparsity": "l0:4", "modes": "3", "halflife": "3d", "alpha": "0.001",
		"warmup": "800", "refresh_every": "32", "on_delay": "6/10", "off_delay": "20m",
		"deadband": "0.1", "adapt": "false", "limits": "empirical:reference.lp", "smoothing": "0.3", "mewma_lambda": "0.1", "creep_lambda": "0.1",
		"on_span":    "2m",
		"statistics": "t2,spe", "state_scoring": "most_probable", "new_point": "false", "new_point_res": "false", "calibrate_points": "true", "spread_restarts_hold": "true",
		"driver_level": "off", "level_shift": "false", "level_window": "10m",
	}
	base := &configs.Config{}
	base.ApplyDefaults()
	for _, st := range configs.Settings() {
		t.Run(st.Name, func(t *testing.T) {
			v, ok := sample[st.Name]
			if !ok {
				t.Fatalf("no sample value for %s", st.Name)
			}
			// A configuration file.
			doc := st.Section + ":\n  " + st.Name + ": " + st.YAML(v) + "\n"
			fromFile, err := configs.Parse("sample.yaml", []byte(doc))
			if err != nil {
				t.Fatalf("%s: %v", doc, err)
			}
			// A flag.
			fs := flag.NewFlagSet("t", flag.ContinueOnError)
			fs.SetOutput(io.Discard)
			var mf modelFlags
			mf.register(fs, false)
			if err := fs.Parse([]string{"--" + st.Flag(), v}); err != nil {
				t.Fatal(err)
			}
			fromFlag, err := mf.load(fs)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(fromFile.Model, fromFlag.Model) || !reflect.DeepEqual(fromFile.Alerts, fromFlag.Alerts) {
				t.Errorf("config key %s and flag --%s differ:\n file %+v %+v\n flag %+v %+v",
					st.Path(), st.Flag(), fromFile.Model, fromFile.Alerts, fromFlag.Model, fromFlag.Alerts)
			}
			if reflect.DeepEqual(fromFile.Model, base.Model) && reflect.DeepEqual(fromFile.Alerts, base.Alerts) {
				t.Errorf("%s = %s is the default; pick another sample", st.Name, v)
			}
			if !st.Grid {
				return
			}
			// A tune grid.
			g, err := tune.ParseGrid("grid.yaml", []byte(st.Name+": ["+v+"]\n"))
			if err != nil {
				t.Fatal(err)
			}
			fromGrid := g.Settings()[0].Apply(base)
			if !reflect.DeepEqual(fromFile.Model, fromGrid.Model) || !reflect.DeepEqual(fromFile.Alerts, fromGrid.Alerts) {
				t.Errorf("config key %s and grid key %s differ:\n file %+v %+v\n grid %+v %+v",
					st.Path(), st.Name, fromFile.Model, fromFile.Alerts, fromGrid.Model, fromGrid.Alerts)
			}
		})
	}
}
