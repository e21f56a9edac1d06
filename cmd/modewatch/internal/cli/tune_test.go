package cli

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/sim"
)

// demoWithTruth writes hours of the demo scenario (invented data) from
// the start of its last normal day, one fault-free day and then the test
// days with their faults (F1 from 28 h on), as one log, and a truth file
// holding the episodes that start within them.
func demoWithTruth(t *testing.T, hours int) (log, truth string) {
	t.Helper()
	demo, err := sim.Demo()
	if err != nil {
		t.Fatal(err)
	}
	s := demo.Tested()
	s.Start = s.Start.Add(-24 * time.Hour)
	s.Duration = time.Duration(hours) * time.Hour
	dir := t.TempDir()
	files, err := s.WriteFiles(dir, false)
	if err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(files.Truth)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := evaluate.DecodeTruth(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	end := s.Start.Add(s.Duration)
	var keep []evaluate.Episode
	for _, e := range tr.Episodes {
		if e.Start.Before(end) {
			keep = append(keep, e)
		}
	}
	tr.Episodes = keep
	b, _ = json.Marshal(tr)
	truth = filepath.Join(dir, "truth-clipped.json")
	if err := os.WriteFile(truth, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return files.Readings, truth
}

func readCSV(t *testing.T, path string) []map[string]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	var out []map[string]string
	for _, r := range recs[1:] {
		m := map[string]string{}
		for i, k := range recs[0] {
			m[k] = r[i]
		}
		out = append(out, m)
	}
	return out
}

// TestTuneMatchesReplays runs tune on 2 × 2 grids and checks every row
// against a separate "replay --truth --json" with the same settings given
// as a configuration file: the metrics must be identical, not merely
// close. Once learning from the start (a model setting × an alarm
// setting) and once from a fitted model (an alarm setting × adapt).
func TestTuneMatchesReplays(t *testing.T) {
	log, truth := demoWithTruth(t, 50)
	normal, _ := demoWithTruth(t, 24) // the last normal day, fault-free
	dir := t.TempDir()
	model := filepath.Join(dir, "demo.model")
	if code, _, errs := runCLI(t, "", "fit", "--quiet", "--out", model, normal); code != ExitOK {
		t.Fatalf("fit: %s", errs)
	}
	for _, tc := range []struct {
		name, grid string
		args       []string
		config     func(row map[string]string) string
	}{
		{
			name: "online", grid: "alpha: [0.01, 0.001]\non_delay: [\"3/5\", \"6/10\"]\n",
			config: func(row map[string]string) string {
				n, m, _ := strings.Cut(row["on_delay"], "/")
				return fmt.Sprintf("model:\n  alpha: %s\nalerts:\n  on_delay: {n: %s, m: %s}\n", row["alpha"], n, m)
			},
		},
		{
			name: "fitted", grid: "on_delay: [\"3/5\", \"6/10\"]\nadapt: [true, false]\n", args: []string{"--model", model},
			config: func(row map[string]string) string {
				n, m, _ := strings.Cut(row["on_delay"], "/")
				return fmt.Sprintf("model:\n  adapt: %s\nalerts:\n  on_delay: {n: %s, m: %s}\n", row["adapt"], n, m)
			},
		},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			grid := filepath.Join(dir, "grid.yaml")
			os.WriteFile(grid, []byte(tc.grid), 0o644)
			out := filepath.Join(dir, "out")
			args := append([]string{"tune", "--input", log, "--truth", truth, "--grid", grid, "--out", out, "--jobs", "2"}, tc.args...)
			code, stdout, errs := runCLI(t, "", args...)
			if code != ExitOK {
				t.Fatalf("tune: exit %d\n%s\n%s", code, stdout, errs)
			}
			rows := readCSV(t, filepath.Join(out, "tune.csv"))
			if len(rows) != 4 {
				t.Fatalf("%d rows, want 4", len(rows))
			}
			pareto := 0
			for i, row := range rows {
				if row["rank"] != strconv.Itoa(i+1) {
					t.Errorf("row %d has rank %s", i, row["rank"])
				}
				if row["pareto"] == "true" {
					pareto++
				}
				if row["error"] != "" {
					t.Fatalf("row %d: %s", i, row["error"])
				}
				cfg := filepath.Join(dir, fmt.Sprintf("c%d.yaml", i))
				os.WriteFile(cfg, []byte(tc.config(row)), 0o644)
				args := append([]string{"replay", "--config", cfg, "--truth", truth, "--json", "--quiet", log}, tc.args...)
				code, js, errs := runCLI(t, "", args...)
				if code != ExitOK {
					t.Fatalf("replay: exit %d: %s", code, errs)
				}
				s := decodeSummary(t, js)
				mt := s.Metrics
				num := func(p *float64) string {
					if p == nil {
						return ""
					}
					return strconv.FormatFloat(*p, 'g', -1, 64)
				}
				want := map[string]string{
					"episodes": strconv.Itoa(mt.Episodes), "detected": strconv.Itoa(mt.Detected), "detection_rate": num(mt.DetectionRate),
					"false_alerts": strconv.Itoa(mt.FalseAlerts), "false_alerts_per_day": num(mt.FalseAlertsPerDay),
					"median_delay_s": num(mt.MedianDelayS), "isolated_top3": strconv.Itoa(mt.IsolatedTop3),
					"alerts": strconv.Itoa(s.Alerts), "frames": strconv.FormatUint(s.Frames, 10),
				}
				for k, v := range want {
					if row[k] != v {
						t.Errorf("%s: %s = %q in tune, %q in replay", tc.config(row), k, row[k], v)
					}
				}
			}
			if pareto == 0 {
				t.Error("no row on the Pareto front")
			}
			if !strings.Contains(stdout, "rank") || !strings.Contains(stdout, "*") {
				t.Errorf("table:\n%s", stdout)
			}
			// The best setting is a configuration that check accepts.
			if code, o, e := runCLI(t, "", "check", "--config", filepath.Join(out, "best.yaml")); code != ExitOK {
				t.Errorf("check best.yaml: exit %d\n%s%s", code, o, e)
			}
		})
	}
}

// TestTuneChecksFirst: a broken grid, or a grid listing model settings
// with a fitted model, stops tune with exit status 2 before any replay
// (no output directory is created), naming the lines.
func TestTuneChecksFirst(t *testing.T) {
	log, truth := demoWithTruth(t, 2)
	dir := t.TempDir()
	grid := filepath.Join(dir, "bad.yaml")
	os.WriteFile(grid, []byte("alpha: [0.01, 2]\nwarmup: [100]\nnoise: [1]\n"), 0o644)
	out := filepath.Join(dir, "out")
	code, _, errs := runCLI(t, "", "tune", "--input", log, "--truth", truth, "--grid", grid, "--out", out)
	if code != ExitUsage || !strings.Contains(errs, grid+":1:15: alpha[1]") || !strings.Contains(errs, grid+":3:1: noise") {
		t.Errorf("exit %d, stderr %q", code, errs)
	}
	if _, err := os.Stat(out); !os.IsNotExist(err) {
		t.Errorf("output directory created for a broken grid: %v", err)
	}

	model := filepath.Join(dir, "m.model")
	if code, _, errs := runCLI(t, "", "fit", "--quiet", "--out", model, log); code != ExitOK {
		t.Fatalf("fit: %s", errs)
	}
	grid2 := filepath.Join(dir, "model.yaml")
	os.WriteFile(grid2, []byte("on_delay: [\"3/5\"]\nsparsity: [none]\n"), 0o644)
	code, _, errs = runCLI(t, "", "tune", "--input", log, "--truth", truth, "--grid", grid2, "--model", model, "--out", out)
	if code != ExitUsage || !strings.Contains(errs, grid2+":2: sparsity") {
		t.Errorf("model keys with --model: exit %d, stderr %q", code, errs)
	}
	if code, _, errs := runCLI(t, "", "tune", "--input", "-", "--truth", truth, "--grid", grid2); code != ExitUsage || !strings.Contains(errs, "standard input") {
		t.Errorf("stdin: exit %d, %q", code, errs)
	}
}

// TestDemoTune runs tune with the demo grid documented in the README
// (configs/grid-demo.yaml) on the whole demo scenario as sim writes it
// (invented data, normal.lp and test.lp: 4 normal days and 2 test days, 7
// labelled episodes) and checks the claim made there: the best setting,
// scored strictly, stays within the budget of one false alert per
// simulated day and detects at least 5 of the 7 episodes (measured: 5 of
// 7 at 0.67 per day; no setting of the grid detects more than 5 within
// the budget), and best.yaml replays to the same metrics.
func TestDemoTune(t *testing.T) {
	s, err := sim.Demo()
	if err != nil {
		t.Fatal(err)
	}
	files, err := s.WriteFiles(t.TempDir(), false)
	if err != nil {
		t.Fatal(err)
	}
	truth := files.Truth
	out := filepath.Join(t.TempDir(), "tune")
	grid := filepath.Join("..", "..", "..", "..", "configs", "grid-demo.yaml")
	code, stdout, errs := runCLI(t, "", "tune", "--input", files.Normal, "--input", files.Test, "--truth", truth, "--grid", grid, "--out", out)
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	t.Log("\n" + stdout)
	rows := readCSV(t, filepath.Join(out, "tune.csv"))
	best := rows[0]
	if det, _ := strconv.Atoi(best["detected"]); len(rows) != 16 || det < 5 || best["episodes"] != "7" {
		t.Fatalf("%d rows; best %v", len(rows), best)
	}
	perDay, _ := strconv.ParseFloat(best["false_alerts_per_day"], 64)
	if perDay > 1 {
		t.Errorf("best setting has %v false alerts per day", perDay)
	}
	code, js, errs := runCLI(t, "", "replay", "--config", filepath.Join(out, "best.yaml"), "--truth", truth, "--json", "--quiet", files.Normal, files.Test)
	if code != ExitOK {
		t.Fatalf("replay best.yaml: %s", errs)
	}
	if m := decodeSummary(t, js).Metrics; strconv.Itoa(m.Detected) != best["detected"] || strconv.Itoa(m.FalseAlerts) != best["false_alerts"] {
		t.Errorf("best.yaml replays to %d detected, %d false alerts", m.Detected, m.FalseAlerts)
	}
}

// TestSlowWatch: a setting running past the threshold is named once on
// standard error; one that ends in time is not, and none is named before
// the threshold. The watch's clock is the test's here (its ticker is an
// hour away), so that a pause of the test goroutine on a loaded machine
// cannot make the quick setting run late; then the ticker itself names a
// slow setting, once.
func TestSlowWatch(t *testing.T) {
	var errb testkit.SyncBuffer
	const after = time.Hour
	w := newSlowWatch(IO{Err: &errb}, false, after)
	t0 := time.Date(2026, 3, 9, 6, 0, 0, 0, time.UTC)
	clock := t0
	w.now = func() time.Time { return clock }
	quick := w.begin("alpha=0.01")
	done := w.begin("sparsity=l0:3")
	w.check(t0.Add(after - time.Nanosecond))
	if s := errb.String(); s != "" {
		t.Errorf("named before the threshold: %q", s)
	}
	quick()
	for k := range 4 { // the threshold, then three more ticks: no repeat
		w.check(t0.Add(after + time.Duration(k)*after/4))
	}
	done()
	w.stop()
	if s := errb.String(); strings.Count(s, "still replaying sparsity=l0:3 after 1h0m0s") != 1 || strings.Count(s, "still replaying") != 1 || strings.Contains(s, "alpha") {
		t.Errorf("stderr %q", s)
	}

	// The ticker: a setting running past 20 ms is named, once.
	var errb2 testkit.SyncBuffer
	w2 := newSlowWatch(IO{Err: &errb2}, false, 20*time.Millisecond)
	done2 := w2.begin("sparsity=l0:3")
	deadline := time.Now().Add(time.Minute)
	for !strings.Contains(errb2.String(), "still replaying sparsity=l0:3") {
		if time.Now().After(deadline) {
			t.Fatalf("no report of the slow setting: %q", errb2.String())
		}
		time.Sleep(5 * time.Millisecond)
	}
	time.Sleep(60 * time.Millisecond) // room for three more ticks, which must not repeat it
	done2()
	w2.stop()
	if s := errb2.String(); strings.Count(s, "still replaying") != 1 {
		t.Errorf("stderr %q", s)
	}
}
