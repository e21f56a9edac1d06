package cli

import (
	"os"
	"path/filepath"
	"testing"

	"modewatch/cmd/modewatch/internal/pipeline"
)

// TestFitCalibrationFolds: with alerts.calibration_folds 2, fit scores
// every frame of the normal log once, each half by a model learned on the
// other (cross-fitting), so each unit's calibration holds out the whole
// day of the demo plant's first 24 h (invented data); by default it holds
// out the second half only.
func TestFitCalibrationFolds(t *testing.T) {
	if testing.Short() {
		t.Skip("fits a day of the demo plant five times")
	}
	p, _ := demoLog(t, 24)
	dir := t.TempDir()
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
			if err != nil {
				t.Fatal(err)
			}
			for _, u := range mf.Units {
				cal := u.Calibration
				if cal == nil {
					t.Errorf("unit %s: no calibration", u.Name)
					continue
				}
				if cal.HeldOutDays < c.lo || cal.HeldOutDays > c.hi || !(cal.Scale > 0) {
					t.Errorf("unit %s: %.3f held-out days (want %.2f to %.2f), scale %v", u.Name, cal.HeldOutDays, c.lo, c.hi, cal.Scale)
				}
			}
		})
	}
}
