package cli

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"modewatch/cmd/modewatch/internal/evaluate"
)

// TestSimSuite runs the realism suite with one day on each side of the
// split (the README's table uses the full days) and checks that every
// plant, the demo included, went through sim, fit and replay, and that
// each row adds up: its episodes are the truth file's, its units the
// plant's, its kinds the episodes', and its open share and longest alert
// come from the per-unit metrics.
func TestSimSuite(t *testing.T) {
	out := t.TempDir()
	code, stdout, errs := runCLI(t, "", "sim", "--suite", "--days", "1", "--json", "--out", out)
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var rows []suiteRow
	if err := json.Unmarshal([]byte(stdout), &rows); err != nil {
		t.Fatalf("%v\n%s", err, stdout)
	}
	want := []string{"compressor-station", "district-heating", "water-works", "demo"}
	if len(rows) != len(want) {
		t.Fatalf("%d rows, want %v", len(rows), want)
	}
	for i, r := range rows {
		t.Run(r.Plant, func(t *testing.T) {
			if r.Plant != want[i] || r.Error != "" {
				t.Fatalf("row %d: plant %q, error %q; want %q", i, r.Plant, r.Error, want[i])
			}
			tr, err := evaluate.ReadTruth(filepath.Join(out, r.Plant, "truth.json"))
			if err != nil {
				t.Fatal(err)
			}
			m := r.Metrics
			if m.Episodes != len(tr.Episodes) || m.Episodes == 0 || m.Detected > m.Episodes || m.IsolatedTop3 > m.Detected {
				t.Errorf("episodes %d (truth %d), detected %d, isolated %d", m.Episodes, len(tr.Episodes), m.Detected, m.IsolatedTop3)
			}
			if len(m.Units) != r.Units {
				t.Errorf("%d units scored, the plant has %d", len(m.Units), r.Units)
			}
			eps, det := 0, 0
			for _, k := range r.Kinds {
				eps += k.Episodes
				det += k.Detected
			}
			if eps != m.Episodes || det != m.Detected {
				t.Errorf("by kind: %d episodes, %d detected; metrics %d, %d", eps, det, m.Episodes, m.Detected)
			}
			longest := 0.0
			for _, u := range m.Units {
				longest = max(longest, u.LongestOpenAlertS)
				if u.AlertOpenShareNormal != nil && r.OpenShare != nil && *u.AlertOpenShareNormal > *r.OpenShare {
					t.Errorf("unit %s has a larger open share than the row's worst unit %s", u.Unit, r.WorstUnit)
				}
			}
			if r.LongestOpenS != longest || r.OpenShare == nil {
				t.Errorf("longest %g s (units %g s), open share %v", r.LongestOpenS, longest, r.OpenShare)
			}
			// One day each side.
			if r.TestDays != 1 || r.NormalDays != 1 {
				t.Errorf("days %g+%g, want 1+1", r.NormalDays, r.TestDays)
			}
			for _, f := range []string{"normal.lp", "test.lp", "model.json"} {
				if _, err := os.Stat(filepath.Join(out, r.Plant, f)); err != nil {
					t.Error(err)
				}
			}
		})
	}

	// The table for one plant, as printed.
	code, stdout, errs = runCLI(t, "", "sim", "--suite", "--days", "0.25", "--plants", "demo")
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, w := range []string{"default settings", "plant ", "false/day", "open share", "longest alert", "\ndemo ", "Advisory only"} {
		if !strings.Contains(stdout, w) {
			t.Errorf("table lacks %q:\n%s", w, stdout)
		}
	}
}

// TestSimSuiteConfig: --config reaches fit (the model carries the
// configuration's sparsity, l0:3, where the default is l0:6).
func TestSimSuiteConfig(t *testing.T) {
	out := t.TempDir()
	cfg := filepath.Join(t.TempDir(), "sparse.yaml")
	if err := os.WriteFile(cfg, []byte("model:\n  sparsity: \"l0:3\"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, stdout, errs := runCLI(t, "", "sim", "--suite", "--days", "0.25", "--plants", "demo", "--config", cfg, "--out", out)
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.Contains(stdout, "settings of "+cfg) {
		t.Errorf("the table does not name the settings:\n%s", stdout)
	}
	b, err := os.ReadFile(filepath.Join(out, "demo", "model.json"))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(b), `"sparsity": "l0:3"`) {
		t.Error("the model was not fitted with the configuration's sparsity l0:3")
	}
}

func TestSimSuiteUsage(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"sim", "--suite", "--plants", "nowhere"}, `unknown plant "nowhere"`},
		{[]string{"sim", "--suite", "--scenario", "x.yaml"}, "do not apply"},
		{[]string{"sim", "--out", "x", "--days", "1"}, "go with --suite"},
		{[]string{"sim", "--suite", "--days", "-1"}, "want D > 0"},
	} {
		code, _, errs := runCLI(t, "", c.args...)
		if code != ExitUsage || !strings.Contains(errs, c.want) {
			t.Errorf("%v: exit %d, %q; want usage error …%s…", c.args, code, errs, c.want)
		}
	}
}
