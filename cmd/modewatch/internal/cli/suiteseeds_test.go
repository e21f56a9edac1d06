package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"

	"modewatch/cmd/modewatch/internal/evaluate"
)

// The realism suite is invented data (configs/realism, the demo plant):
// these tests check the yardstick's arithmetic and plumbing, not the
// detector.

// TestSuiteSeedsOneIsTheSuite: with one seed, the run is the one-seed
// suite's row of the same plant (the same JSON, field for field), and the
// summary of that one run repeats its figures: a mean of one value is that
// value. One day on each side of the split keeps it short; the water works
// and the demo give detections, misses, false alerts and budgets there.
func TestSuiteSeedsOneIsTheSuite(t *testing.T) {
	args := []string{"sim", "--suite", "--days", "1", "--plants", "water-works,demo", "--json"}
	code, stdout, errs := runCLI(t, "", args...)
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var rows []suiteRow
	if err := json.Unmarshal([]byte(stdout), &rows); err != nil {
		t.Fatal(err)
	}
	code, stdout, errs = runCLI(t, "", append(args, "--seeds", "1")...)
	if code != ExitOK {
		t.Fatalf("--seeds 1: exit %d: %s", code, errs)
	}
	var rep seedsReport
	if err := json.Unmarshal([]byte(stdout), &rep); err != nil {
		t.Fatal(err)
	}
	if rep.Seeds != 1 || len(rep.Runs) != len(rows) || len(rep.Summary) != len(rows) {
		t.Fatalf("seeds %d, %d runs, %d summaries; want 1, %d, %d", rep.Seeds, len(rep.Runs), len(rep.Summary), len(rows), len(rows))
	}
	for i, r := range rows {
		t.Run(r.Plant, func(t *testing.T) {
			a, _ := json.Marshal(r)
			b, _ := json.Marshal(rep.Runs[i])
			if !bytes.Equal(a, b) {
				t.Errorf("the run on the shipped seed differs from the suite's row:\nsuite  %s\nseeds  %s", a, b)
			}
			s, m := rep.Summary[i], r.Metrics
			if s.Plant != r.Plant || !slices.Equal(s.Seeds, []uint64{r.Seed}) || s.Runs != 1 || s.Failed != 0 || s.Episodes != m.Episodes {
				t.Errorf("summary %s seeds %v runs %d failed %d episodes %d; row %s seed %d episodes %d", s.Plant, s.Seeds, s.Runs, s.Failed, s.Episodes, r.Plant, r.Seed, m.Episodes)
			}
			if s.Detected != float64(m.Detected) || s.Isolated != float64(m.IsolatedTop3) || s.PastHold != r.PastHold {
				t.Errorf("summary %g detected, %g isolated, %d past hold; row %d, %d, %d", s.Detected, s.Isolated, s.PastHold, m.Detected, m.IsolatedTop3, r.PastHold)
			}
			if !reflect.DeepEqual(s.FalsePerDay, m.FalseAlertsPerDay) || !reflect.DeepEqual(s.OpenShareMean, r.OpenShare) ||
				!reflect.DeepEqual(s.OpenShareWorst, r.OpenShare) || s.WorstUnit != r.WorstUnit || s.WorstSeed != r.Seed {
				t.Errorf("summary false/day %v, open share %v/%v in %s on %d; row %v, %v in %s", s.FalsePerDay, s.OpenShareMean, s.OpenShareWorst, s.WorstUnit, s.WorstSeed,
					m.FalseAlertsPerDay, r.OpenShare, r.WorstUnit)
			}
			if len(s.Budgets) != len(r.Budgets) || len(r.Budgets) == 0 {
				t.Fatalf("%d budget lines, the row has %d", len(s.Budgets), len(r.Budgets))
			}
			for j, b := range r.Budgets {
				sb := s.Budgets[j]
				if sb.Unit != b.Unit || sb.Runs != 1 || sb.False != b.False || sb.Expected != b.Expected || (sb.WithinFactor2 == 1) != b.WithinFactor2 || sb.Pooled != b.WithinFactor2 {
					t.Errorf("budget %+v; row %+v", sb, b)
				}
			}
		})
	}
	// The two plants differ on the targets at one day a side (the water
	// works have a false alert a day and a unit open 4 %), so the shares
	// below are not all alike; each is the target checked on the row.
	for i, r := range rows {
		for j, tg := range suiteTargets {
			want := seedTargetShare{Target: tg.name}
			if tg.applies(&r) {
				want.Runs = 1
				if tg.met(&r) {
					want.Met = 1
				}
			}
			if got := rep.Summary[i].Targets[j]; got != want {
				t.Errorf("%s: target %+v, want %+v", r.Plant, got, want)
			}
		}
	}
}

// TestSuiteSeedsSequence: the seeds are the documented sequence, the
// shipped seed of each plant file and the next ones (seed + k), the run
// with k = 0 is the shipped plant itself, and the scenarios they seed are
// reproducible and differ from seed to seed.
func TestSuiteSeedsSequence(t *testing.T) {
	plants, err := suitePlants(nil)
	if err != nil {
		t.Fatal(err)
	}
	// The shipped seeds, as in the plant files (configs/realism/*.yaml,
	// configs/scenario-demo.yaml) and in sim's help.
	shipped := map[string]uint64{"compressor-station": 11001, "district-heating": 11003, "water-works": 11002, "demo": 20260311}
	_, helpOut, helpErr := runCLI(t, "", "sim", "--help")
	help := helpOut + helpErr
	for _, p := range plants {
		want, ok := shipped[p.name]
		if !ok || p.s.Seed != want {
			t.Fatalf("plant %s: seed %d, want %d", p.name, p.s.Seed, want)
		}
		if !strings.Contains(help, fmt.Sprint(want)) {
			t.Errorf("sim's help does not name %s's seed %d", p.name, want)
		}
		seeds := suiteSeeds(p.s.Seed, 10)
		for k, s := range seeds {
			if s != want+uint64(k) {
				t.Errorf("%s: seed %d is %d, want %d", p.name, k, s, want+uint64(k))
			}
		}
	}
	if got := suiteSeeds(1<<64-1, 2); !slices.Equal(got, []uint64{1<<64 - 1, 0}) {
		t.Errorf("wrapping: %v", got)
	}

	// The runs, in order, each on a clone of its plant with its seed.
	var got []string
	runner := func(_ context.Context, dir string, p suitePlant, _ suiteOptions) suiteRow {
		got = append(got, fmt.Sprintf("%s %d %s", p.name, p.s.Seed, filepath.Base(dir)))
		return suiteRow{Plant: p.name, Seed: p.s.Seed}
	}
	base := t.TempDir()
	if _, err := runSeedRuns(context.Background(), base, plants[:2], 3, 1, true, suiteOptions{}, runner, nil); err != nil {
		t.Fatal(err)
	}
	want := []string{"compressor-station 11001 11001", "compressor-station 11002 11002", "compressor-station 11003 11003",
		"district-heating 11003 11003", "district-heating 11004 11004", "district-heating 11005 11005"}
	if !slices.Equal(got, want) {
		t.Errorf("runs %q, want %q", got, want)
	}
	if plants[0].s.Seed != 11001 {
		t.Errorf("a run changed the loaded plant's seed to %d", plants[0].s.Seed)
	}

	// The readings: the same seed twice gives the same bytes, the next
	// seed others; k = 0 is the plant as shipped.
	for _, p := range plants {
		head := p.s.Head(p.s.Period * 200)
		lp := func(seed uint64) []byte {
			c := head.Clone()
			c.Seed = seed
			var b bytes.Buffer
			if err := c.WriteLineProtocol(&b); err != nil {
				t.Fatal(err)
			}
			return b.Bytes()
		}
		var shippedLP bytes.Buffer
		if err := head.WriteLineProtocol(&shippedLP); err != nil {
			t.Fatal(err)
		}
		s0, s1 := suiteSeeds(p.s.Seed, 2)[0], suiteSeeds(p.s.Seed, 2)[1]
		a, b, c := lp(s0), lp(s0), lp(s1)
		if !bytes.Equal(a, b) || !bytes.Equal(a, shippedLP.Bytes()) {
			t.Errorf("%s: seed %d is not reproducible or not the shipped plant", p.name, s0)
		}
		if bytes.Equal(a, c) {
			t.Errorf("%s: seeds %d and %d give the same readings", p.name, s0, s1)
		}
	}
}

// TestSuiteSeedsRunDirs: with --out every run is kept in DIR/<plant>/<seed>,
// the JSON's runs carry the seeds of the sequence, and --config reaches
// every run's fit (its model has the configuration's sparsity l0:3, where
// the default is l0:6).
func TestSuiteSeedsRunDirs(t *testing.T) {
	out := t.TempDir()
	cfg := filepath.Join(t.TempDir(), "sparse.yaml")
	if err := os.WriteFile(cfg, []byte("model:\n  sparsity: \"l0:3\"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, stdout, errs := runCLI(t, "", "sim", "--suite", "--seeds", "2", "--days", "0.25", "--plants", "demo", "--out", out, "--json", "--config", cfg)
	if code != ExitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var rep seedsReport
	if err := json.Unmarshal([]byte(stdout), &rep); err != nil {
		t.Fatal(err)
	}
	if len(rep.Runs) != 2 || rep.Runs[0].Seed != 20260311 || rep.Runs[1].Seed != 20260312 || rep.Settings != "settings of "+cfg {
		t.Fatalf("settings %q, runs %+v", rep.Settings, rep.Runs)
	}
	for _, r := range rep.Runs {
		model, err := os.ReadFile(filepath.Join(out, "demo", fmt.Sprint(r.Seed), "model.json"))
		if err != nil {
			t.Fatal(err)
		}
		if !strings.Contains(string(model), `"sparsity": "l0:3"`) {
			t.Errorf("seed %d: the model was not fitted with the configuration's sparsity l0:3", r.Seed)
		}
		tr, err := evaluate.ReadTruth(filepath.Join(out, "demo", fmt.Sprint(r.Seed), "truth.json"))
		if err != nil {
			t.Fatal(err)
		}
		if r.Metrics.Episodes != len(tr.Episodes) {
			t.Errorf("seed %d: %d episodes, its truth file %d", r.Seed, r.Metrics.Episodes, len(tr.Episodes))
		}
	}
	a, err := os.ReadFile(filepath.Join(out, "demo", "20260311", "normal.lp"))
	if err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(filepath.Join(out, "demo", "20260312", "normal.lp"))
	if err != nil {
		t.Fatal(err)
	}
	if bytes.Equal(a, b) {
		t.Error("the two seeds wrote the same readings")
	}
}

// TestSuiteSeedsFailure: a run that fails is named by plant and seed, in
// the error and in the table, and the other runs are still summed up. The
// second demo seed's run directory is taken by a file, so its sim fails.
func TestSuiteSeedsFailure(t *testing.T) {
	out := t.TempDir()
	if err := os.MkdirAll(filepath.Join(out, "demo"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(out, "demo", "20260312"), []byte("in the way"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, stdout, errs := runCLI(t, "", "sim", "--suite", "--seeds", "3", "--days", "0.25", "--plants", "demo", "--out", out)
	if code != ExitFailure {
		t.Fatalf("exit %d, want %d: %s", code, ExitFailure, errs)
	}
	for _, w := range []string{"plant demo seed 20260312: sim: mkdir"} {
		if !strings.Contains(errs, w) || !strings.Contains(stdout, "error: "+w) {
			t.Errorf("error output %q / table lacks %q:\n%s", errs, w, stdout)
		}
	}
	if strings.Contains(errs, "20260311") || strings.Contains(errs, "20260313") {
		t.Errorf("the error names a seed that ran: %s", errs)
	}
	// The table sums up the two runs that went through: 20260311–20260313,
	// 2 runs.
	if !strings.Contains(stdout, "20260311–20260313  2 ") {
		t.Errorf("the table does not sum up the 2 good runs:\n%s", stdout)
	}
}

// TestSuiteSeedsOrder: runs finish in any order (here the reverse of
// their start, each waiting for the next to finish) and the rows come back
// in plant then seed order; a cancelled context stops the runs.
func TestSuiteSeedsOrder(t *testing.T) {
	plants, err := suitePlants([]string{"water-works", "demo"})
	if err != nil {
		t.Fatal(err)
	}
	const n = 3
	finished := make([]chan struct{}, 2*n+1)
	for i := range finished {
		finished[i] = make(chan struct{})
	}
	close(finished[2*n])
	// index: the run's place in plant then seed order.
	index := func(p suitePlant) int {
		first := map[string]uint64{"water-works": 11002, "demo": 20260311}
		return slices.IndexFunc(plants, func(q suitePlant) bool { return q.name == p.name })*n + int(p.s.Seed-first[p.name])
	}
	var order []int
	runner := func(_ context.Context, _ string, p suitePlant, _ suiteOptions) suiteRow {
		i := index(p)
		<-finished[i+1]
		order = append(order, i) // serialised by the chain
		close(finished[i])
		return suiteRow{Plant: p.name, Seed: p.s.Seed}
	}
	rows, err := runSeedRuns(context.Background(), t.TempDir(), plants, n, 2*n, false, suiteOptions{}, runner, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(order, []int{5, 4, 3, 2, 1, 0}) {
		t.Errorf("finished in order %v, want the reverse of the start", order)
	}
	var got []string
	for _, r := range rows {
		got = append(got, fmt.Sprintf("%s %d", r.Plant, r.Seed))
	}
	want := []string{"water-works 11002", "water-works 11003", "water-works 11004", "demo 20260311", "demo 20260312", "demo 20260313"}
	if !slices.Equal(got, want) {
		t.Errorf("rows %q, want %q", got, want)
	}

	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	ran := 0
	_, err = runSeedRuns(ctx, t.TempDir(), plants, n, 1, false, suiteOptions{}, func(context.Context, string, suitePlant, suiteOptions) suiteRow {
		ran++
		return suiteRow{}
	}, nil)
	if !errors.Is(err, context.Canceled) || ran != 0 {
		t.Errorf("cancelled: %v after %d runs", err, ran)
	}
}

// TestSummariseSeeds checks the summary's arithmetic on hand-made runs;
// each expected figure is worked out by hand in its comment.
func TestSummariseSeeds(t *testing.T) {
	f := func(v float64) *float64 { return &v }
	budget := func(unit string, falses int, expected, perDay float64, within bool) suiteBudget {
		return suiteBudget{Unit: unit, Budget: perDay, False: falses, Expected: expected, WithinFactor2: within}
	}
	// run makes one run's row of a plant with 10 episodes and 5 test days,
	// falses false alerts in them (falses/5 a day).
	run := func(seed uint64, period string, det, iso, falses int, delayS, open *float64, unit string, past int, b ...suiteBudget) suiteRow {
		return suiteRow{Plant: "p", Seed: seed, Period: period, TestDays: 5, WorstUnit: unit, OpenShare: open, PastHold: past, Budgets: b,
			Metrics: evaluate.Metrics{Episodes: 10, Detected: det, IsolatedTop3: iso, FalseAlerts: falses, FalseAlertsPerDay: f(float64(falses) / 5), MedianDelayS: delayS}}
	}
	// The replay's rate divides by the readings' own span, a little
	// shorter than the 5 plant-days: 5 alerts can read 1.000002 a day and
	// still meet the target of 1 a plant-day.
	short := func(r suiteRow, perDay float64) suiteRow {
		r.Metrics.FalseAlertsPerDay = &perDay
		return r
	}
	// No test days: no rate, and the false-alert target does not apply.
	noDays := func(r suiteRow) suiteRow {
		r.TestDays, r.Metrics.FalseAlertsPerDay = 0, nil
		return r
	}
	type shares = [7]int // met per target, in the order of suiteTargets
	for _, c := range []struct {
		name                       string
		rows                       []suiteRow
		runs, failed               int
		det, iso                   float64
		perDay, openMean, openMost *float64
		worstUnit                  string
		worstSeed                  uint64
		met, applies               shares
		allMet, past               int
		budgets                    []seedBudget
	}{{
		name: "three runs at 5 s",
		rows: []suiteRow{
			// 9/10 det, 8 iso, 0.2 a day, 10 min, 1 % open, 0 past hold, budget 1 of 2.5 expected, within.
			run(11, "5s", 9, 8, 1, f(600), f(0.01), "a", 0, budget("a", 1, 2.5, 0.25, true), budget("b", 0, 1.0, 0.25, true)),
			// 8/10 det (80 % < 85 %), 7 iso (= 70 %), 5 false alerts in 5 days (= 1 a day; the replay's rate 1.000002), 30 min (= 30 min), 3 % (= 3 %).
			short(run(12, "5s", 8, 7, 5, f(1800), f(0.03), "b", 0, budget("a", 2, 2.5, 0.25, true), budget("b", 3, 1.0, 0.25, false)), 1.000002),
			// 10/10, 6 iso (< 70 %), 8 false alerts (1.6 a day), 31 min, 5 % open in "a", 2 past hold.
			run(13, "5s", 10, 6, 8, f(1860), f(0.05), "a", 2, budget("a", 5, 2.5, 0.25, false), budget("b", 1, 1.0, 0.25, true)),
		},
		runs: 3,
		det:  27.0 / 3, iso: 21.0 / 3, // (9+8+10)/3, (8+7+6)/3
		perDay:   f(2.800002 / 3), // (0.2+1.000002+1.6)/3
		openMean: f(0.09 / 3), openMost: f(0.05), worstUnit: "a", worstSeed: 13,
		// det: 11, 13; iso: 11, 12; false: 11, 12; open: 11, 12; hold: 11, 12; delay: 11, 12; budget: 11.
		met: shares{2, 2, 2, 2, 2, 2, 1}, applies: shares{3, 3, 3, 3, 3, 3, 3},
		allMet: 1, past: 2,
		// a: 1+2+5 = 8 counted, 7.5 expected, allowed 3 · 2 · 0.25 · 5 = 7.5: over; b: 4, 3.0, 7.5: within.
		budgets: []seedBudget{{Unit: "a", Runs: 3, False: 8, Expected: 7.5, Allowed: 7.5, Pooled: false, WithinFactor2: 2},
			{Unit: "b", Runs: 3, False: 4, Expected: 3, Allowed: 7.5, Pooled: true, WithinFactor2: 2}},
	}, {
		name: "a failed run and frames of a minute",
		rows: []suiteRow{
			// No delay target at 60 s; no budget lines: the budget target does not apply.
			run(21, "1m0s", 9, 9, 2, f(7200), f(0.02), "n", 1),
			{Plant: "p", Seed: 22, Period: "1m0s", Error: "fit: no data"},
			run(23, "1m0s", 7, 5, 0, nil, f(0.001), "m", 0),
		},
		runs: 2, failed: 1,
		det: 8, iso: 7, // (9+7)/2, (9+5)/2
		perDay:   f(0.2),                                                      // (0.4+0)/2
		openMean: f(0.0105), openMost: f(0.02), worstUnit: "n", worstSeed: 21, // (0.02+0.001)/2
		// det: 21; iso: 21; false: both; open: both; hold: 23; delay, budget: none apply.
		met: shares{1, 1, 2, 2, 1, 0, 0}, applies: shares{2, 2, 2, 2, 2, 0, 0},
		allMet: 0, past: 1,
	}, {
		name: "no rate, no open share, no delay",
		rows: []suiteRow{noDays(run(31, "20s", 0, 0, 0, nil, nil, "", 0))},
		runs: 1,
		// det, iso 0 of 10; false: no test days, does not apply; open: none, met; hold 0 met; delay: none found, not met.
		met: shares{0, 0, 0, 1, 1, 0, 0}, applies: shares{1, 1, 0, 1, 1, 1, 0},
	}, {
		name:   "every run failed",
		rows:   []suiteRow{{Plant: "p", Seed: 41, Period: "5s", Error: "x"}},
		failed: 1,
	}} {
		t.Run(c.name, func(t *testing.T) {
			seeds := make([]uint64, len(c.rows))
			for i, r := range c.rows {
				seeds[i] = r.Seed
			}
			s := summariseSeeds("p", seeds, c.rows)
			if s.Runs != c.runs || s.Failed != c.failed || s.AllMet != c.allMet || s.PastHold != c.past || s.WorstUnit != c.worstUnit || s.WorstSeed != c.worstSeed {
				t.Errorf("runs %d failed %d all met %d past %d worst %s on %d; want %d %d %d %d %s %d", s.Runs, s.Failed, s.AllMet, s.PastHold, s.WorstUnit, s.WorstSeed,
					c.runs, c.failed, c.allMet, c.past, c.worstUnit, c.worstSeed)
			}
			same := func(name string, got, want *float64) {
				if (got == nil) != (want == nil) || got != nil && !scalar.EqualWithinAbsOrRel(*got, *want, 1e-12, 1e-12) {
					t.Errorf("%s: %v, want %v", name, fmtPtr(got), fmtPtr(want))
				}
			}
			same("detected", &s.Detected, &c.det)
			same("isolated", &s.Isolated, &c.iso)
			same("false/day", s.FalsePerDay, c.perDay)
			same("open share mean", s.OpenShareMean, c.openMean)
			same("open share worst", s.OpenShareWorst, c.openMost)
			for i, tg := range s.Targets {
				if tg.Target != suiteTargets[i].name || tg.Met != c.met[i] || tg.Runs != c.applies[i] {
					t.Errorf("target %s: %d of %d, want %d of %d", tg.Target, tg.Met, tg.Runs, c.met[i], c.applies[i])
				}
			}
			if len(s.Budgets) != len(c.budgets) {
				t.Fatalf("budgets %+v, want %+v", s.Budgets, c.budgets)
			}
			for i, b := range s.Budgets {
				w := c.budgets[i]
				if b.Unit != w.Unit || b.Runs != w.Runs || b.False != w.False || b.WithinFactor2 != w.WithinFactor2 || b.Pooled != w.Pooled ||
					!scalar.EqualWithinAbsOrRel(b.Expected, w.Expected, 1e-12, 1e-12) || !scalar.EqualWithinAbsOrRel(b.Allowed, w.Allowed, 1e-12, 1e-12) {
					t.Errorf("budget %+v, want %+v", b, w)
				}
			}
		})
	}
}

func fmtPtr(p *float64) string {
	if p == nil {
		return "nil"
	}
	return fmt.Sprint(*p)
}

func TestSuiteSeedsUsage(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"sim", "--suite", "--seeds", "0"}, "want N ≥ 1"},
		{[]string{"sim", "--suite", "--seeds", "2", "--jobs", "0"}, "want J ≥ 1"},
		{[]string{"sim", "--suite", "--jobs", "2"}, "--jobs goes with --suite --seeds"},
		{[]string{"sim", "--out", "x", "--seeds", "2"}, "go with --suite"},
	} {
		code, _, errs := runCLI(t, "", c.args...)
		if code != ExitUsage || !strings.Contains(errs, c.want) {
			t.Errorf("%v: exit %d, %q; want usage error …%s…", c.args, code, errs, c.want)
		}
	}
}
