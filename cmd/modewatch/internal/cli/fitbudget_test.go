package cli

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"modewatch/cmd/modewatch/internal/pipeline"
)

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
	p, _ := demoLog(t, 24)
	dir := t.TempDir()
	model := filepath.Join(dir, "model.json")
	code, out, errs := runCLI(t, "", "fit", "--quiet", "--out", model, p)
	if code != ExitOK {
		t.Fatalf("fit: exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "budget 0.5 false alerts/day: limits ×") || !strings.Contains(out, "days of normal log needed") {
		t.Errorf("summary lacks the calibration or the too-short warning:\n%s", out)
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
	}
	cfg := filepath.Join(dir, "off.yaml")
	if err := os.WriteFile(cfg, []byte("alerts:\n  budget: -1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, errs = runCLI(t, "", "fit", "--quiet", "--json", "--config", cfg, "--out", filepath.Join(dir, "off.json"), p)
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
