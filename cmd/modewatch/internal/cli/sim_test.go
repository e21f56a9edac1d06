package cli

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/sim"
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
	// 30 h lie within the demo's normal days: one file, no fault.
	if len(tr.Episodes) != 0 {
		t.Errorf("episodes %+v, want none", tr.Episodes)
	}
	// Cut 6 h after the split: normal.lp and test.lp, and only the demo's
	// first fault (4 h into the test days) starts within them.
	sc, err := sim.Demo()
	if err != nil {
		t.Fatal(err)
	}
	cut := sc.Split.Sub(sc.Start) + 6*time.Hour
	if code, _, errs := runCLI(t, "", "sim", "--duration", cut.String(), "--out", b); code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	nb, _ := os.ReadFile(filepath.Join(b, "normal.lp"))
	tb, _ := os.ReadFile(filepath.Join(b, "test.lp"))
	normal := int(sc.Split.Sub(sc.Start) / sc.Period)
	if n, m := strings.Count(string(nb), "\n"), strings.Count(string(tb), "\n"); n != normal*13 || m != 1080*13 {
		t.Errorf("%d and %d lines, want %d·13 and 1080·13", n, m, normal)
	}
	if tr, err = evaluate.ReadTruth(filepath.Join(b, "truth.json")); err != nil {
		t.Fatal(err)
	}
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
