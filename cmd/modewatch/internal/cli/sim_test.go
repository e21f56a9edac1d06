package cli

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"modewatch/cmd/modewatch/internal/evaluate"
)

// TestSimCommand: sim writes readings and a truth file, the same bytes for
// the same scenario, and --duration cuts the scenario (and its labels).
func TestSimCommand(t *testing.T) {
	a, b := t.TempDir(), t.TempDir()
	for _, dir := range []string{a, b} {
		if code, _, errs := runCLI(t, "", "sim", "--duration", "30h", "--out", dir); code != ExitOK {
			t.Fatalf("exit %d: %s", code, errs)
		}
	}
	ra, _ := os.ReadFile(filepath.Join(a, "readings.lp"))
	rb, _ := os.ReadFile(filepath.Join(b, "readings.lp"))
	if len(ra) == 0 || !bytes.Equal(ra, rb) {
		t.Errorf("readings differ between two runs (%d and %d bytes)", len(ra), len(rb))
	}
	// 30 h at 20 s is 5400 samples; the demo plant has 13 assets, one line
	// per asset and sample (before random dropouts of single values).
	if n := strings.Count(string(ra), "\n"); n != 5400*13 {
		t.Errorf("%d lines, want 5400·13", n)
	}
	tr, err := evaluate.ReadTruth(filepath.Join(a, "truth.json"))
	if err != nil {
		t.Fatal(err)
	}
	// Only the demo's first fault (day 2, 04:00) starts within 30 h.
	if len(tr.Episodes) != 1 || tr.Episodes[0].ID != "F1-header-bias" {
		t.Errorf("episodes %+v", tr.Episodes)
	}
	if code, _, _ := runCLI(t, "", "sim", "--out", a, "--duration", "100d"); code != ExitUsage {
		t.Errorf("--duration beyond the scenario: exit %d", code)
	}
	if code, _, _ := runCLI(t, "", "sim", "--out", a, "--scenario", filepath.Join(a, "nope.yaml")); code != ExitUsage {
		t.Errorf("missing scenario: exit %d", code)
	}
}
