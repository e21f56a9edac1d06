package service

import (
	"log/slog"
	"strings"
	"testing"

	"modewatch/cmd/modewatch/internal/testkit"
)

// TestServiceNamesKeptSettings: a service started with a model file and a
// configuration that changes a model setting the file fixes (model.alpha
// for every unit, model.warmup for one unit) logs one warning per setting
// naming it, both values and the units, and starts; a setting left at its
// default is not named although the file differs (fit writes the
// half-life 0). Invented data (the demo plant's first day).
func TestServiceNamesKeptSettings(t *testing.T) {
	if testing.Short() {
		t.Skip("fits a day of the demo plant")
	}
	cfg := fittedConfig(t, t.TempDir(), "units:\n  - name: air\n    model: {warmup: 300}\n")
	cfg.Model.Alpha = 0.002
	var log testkit.SyncBuffer
	startService(t, Options{Config: cfg, Log: slog.New(slog.NewTextHandler(&log, nil))})
	out := string(log.Bytes())
	for _, want := range []string{
		"setting=model.alpha configured=0.002 fitted=0.01 units=air,chill,coolwater,steam",
		"setting=model.warmup configured=300 fitted=500 units=air ",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("log lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "setting=model.halflife") {
		t.Errorf("the default half-life named:\n%s", out)
	}
}
