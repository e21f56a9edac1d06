package cli

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"text/tabwriter"
	"time"

	"github.com/schollz/progressbar/v3"
)

// The suite over seeds ("sim --suite --seeds N") runs every plant on its
// shipped seed s (the plant file's) and the next N − 1, s + k for
// k = 0 … N − 1, each run exactly as the one-seed suite runs a plant (sim,
// fit on the normal days, replay the test days, strict scoring), and sums
// the runs up per plant: the mean figures, the share of runs meeting each
// target, the largest open share's mean and worst, and the per-unit budget
// summed over the runs. One seed flatters or punishes a setting by chance;
// the defaults are chosen on the whole suite over seeds.

// suiteSeeds returns the seeds of n runs of a plant whose file gives
// shipped: shipped + k, k = 0 … n − 1 (wrapping at 2⁶⁴, as the generator's
// seed is any uint64).
func suiteSeeds(shipped uint64, n int) []uint64 {
	out := make([]uint64, n)
	for k := range out {
		out[k] = shipped + uint64(k)
	}
	return out
}

// suiteTarget is one target of the detection work (issues 12 and 13),
// checked on one run's row: applies says whether it is defined for the
// run, met whether the run meets it.
type suiteTarget struct {
	name    string
	applies func(r *suiteRow) bool
	met     func(r *suiteRow) bool
}

// The targets' thresholds.
const (
	targetDetectedPct  = 85               // detected episodes, % of the run's episodes, at least
	targetIsolatedPct  = 70               // isolated (a faulty channel in the top three), %, at least
	targetFalsePerDay  = 1.0              // strict false alerts per plant-day, at most
	targetOpenShare    = 0.03             // every unit's alert-open share of its normal time, at most
	targetDelay        = 30 * time.Minute // median detection delay, at most …
	targetDelayPeriod  = 30 * time.Second // … on plants whose frames come this often or more often
	targetBudgetFactor = 2                // every unit's false alerts a day within this factor of its budget
)

// suiteTargets lists the targets in the order of the over-seeds table.
var suiteTargets = []suiteTarget{
	{fmt.Sprintf("det ≥%d%%", targetDetectedPct), always, func(r *suiteRow) bool {
		return r.Metrics.Episodes > 0 && 100*r.Metrics.Detected >= targetDetectedPct*r.Metrics.Episodes
	}},
	{fmt.Sprintf("iso ≥%d%%", targetIsolatedPct), always, func(r *suiteRow) bool {
		return r.Metrics.Episodes > 0 && 100*r.Metrics.IsolatedTop3 >= targetIsolatedPct*r.Metrics.Episodes
	}},
	// Counted against the plant-days of the test days (the suite's days
	// column), as the budget lines count: the replay's own rate divides
	// by the readings' span, a little shorter at its ends, so that 5
	// alerts in 5 days can read 1.000002 a day.
	{fmt.Sprintf("false ≤%g/d", targetFalsePerDay), func(r *suiteRow) bool { return r.TestDays > 0 }, func(r *suiteRow) bool {
		return float64(r.Metrics.FalseAlerts) <= targetFalsePerDay*r.TestDays
	}},
	{fmt.Sprintf("open ≤%g%%", 100*targetOpenShare), always, func(r *suiteRow) bool {
		return r.OpenShare == nil || *r.OpenShare <= targetOpenShare
	}},
	{"hold 0", always, func(r *suiteRow) bool { return r.PastHold == 0 }},
	{fmt.Sprintf("delay ≤%s", strings.TrimSuffix(targetDelay.String(), "0s")), func(r *suiteRow) bool {
		p, err := time.ParseDuration(r.Period)
		return err == nil && p <= targetDelayPeriod
	}, func(r *suiteRow) bool {
		return r.Metrics.MedianDelayS != nil && *r.Metrics.MedianDelayS <= targetDelay.Seconds()
	}},
	{fmt.Sprintf("budget ×%d", targetBudgetFactor), func(r *suiteRow) bool { return len(r.Budgets) > 0 }, func(r *suiteRow) bool {
		for _, b := range r.Budgets {
			if !b.WithinFactor2 {
				return false
			}
		}
		return true
	}},
}

func always(*suiteRow) bool { return true }

// seedSummary sums up one plant's runs over seeds (the runs without an
// error; Failed counts the others).
type seedSummary struct {
	Plant  string   `json:"plant"`
	Period string   `json:"period"`
	Seeds  []uint64 `json:"seeds"`
	Runs   int      `json:"runs"`   // runs scored
	Failed int      `json:"failed"` // runs that ended in an error
	// Episodes is the plant's labelled episodes in a run (the largest
	// over the runs; every seed of a plant has the same faults).
	Episodes int `json:"episodes"`
	// Detected and Isolated are the mean per run of the detected and the
	// isolated (a faulty channel in the top three) episodes.
	Detected float64 `json:"detected_mean"`
	Isolated float64 `json:"isolated_mean"`
	// FalsePerDay is the mean over the runs of the strict false alerts per
	// test day (null when no run had test days).
	FalsePerDay *float64 `json:"false_alerts_per_day_mean"`
	// Targets says, per target, of how many runs it applies to how many
	// meet it; AllMet counts the runs that meet every target that applies.
	Targets []seedTargetShare `json:"targets"`
	AllMet  int               `json:"runs_meeting_every_target"`
	// OpenShareMean is the mean over the runs of the largest unit open
	// share (suiteRow.OpenShare); OpenShareWorst the largest, in WorstUnit
	// on WorstSeed. Null when no run has one.
	OpenShareMean  *float64 `json:"open_share_mean"`
	OpenShareWorst *float64 `json:"open_share_worst"`
	WorstUnit      string   `json:"worst_unit,omitempty"`
	WorstSeed      uint64   `json:"worst_seed,omitempty"`
	// PastHold sums the alerts open past their fault plus accept_after
	// over the runs.
	PastHold int `json:"open_past_hold"`
	// Budgets sums, per unit, the budget comparison over the runs.
	Budgets []seedBudget `json:"budget,omitempty"`
}

// seedTargetShare is one target over the runs of a plant.
type seedTargetShare struct {
	Target string `json:"target"`
	Met    int    `json:"met"`
	Runs   int    `json:"runs"` // the runs the target applies to
}

// seedBudget sums one unit's budget lines (suiteBudget) over the runs that
// calibrated it.
type seedBudget struct {
	Unit string `json:"unit"`
	Runs int    `json:"runs"`
	// False is the strict false alerts counted over the runs' test days;
	// Expected the sum of fit's expected counts for them; Allowed the sum
	// of targetBudgetFactor · budget · test days, so that False ≤ Allowed
	// (Pooled) is the factor-2 target over all the runs' days together.
	False    int     `json:"false_alerts"`
	Expected float64 `json:"expected_false_alerts"`
	Allowed  float64 `json:"allowed_false_alerts"`
	Pooled   bool    `json:"pooled_within_factor_2"`
	// WithinFactor2 counts the runs in which the unit was within the
	// factor of its budget on its own.
	WithinFactor2 int `json:"runs_within_factor_2"`
}

// summariseSeeds sums up the runs of one plant, given in seed order.
func summariseSeeds(plant string, seeds []uint64, rows []suiteRow) seedSummary {
	s := seedSummary{Plant: plant, Seeds: seeds}
	s.Targets = make([]seedTargetShare, len(suiteTargets))
	for i, t := range suiteTargets {
		s.Targets[i].Target = t.name
	}
	var falseSum, openSum float64
	var falseRuns, openRuns int
	budgetAt := map[string]int{}
	for i := range rows {
		r := &rows[i]
		if s.Period == "" {
			s.Period = r.Period
		}
		if r.Error != "" {
			s.Failed++
			continue
		}
		s.Runs++
		m := r.Metrics
		s.Episodes = max(s.Episodes, m.Episodes)
		s.Detected += float64(m.Detected)
		s.Isolated += float64(m.IsolatedTop3)
		if m.FalseAlertsPerDay != nil {
			falseSum += *m.FalseAlertsPerDay
			falseRuns++
		}
		all := true
		for j, t := range suiteTargets {
			if !t.applies(r) {
				continue
			}
			s.Targets[j].Runs++
			if t.met(r) {
				s.Targets[j].Met++
			} else {
				all = false
			}
		}
		if all {
			s.AllMet++
		}
		if r.OpenShare != nil {
			openSum += *r.OpenShare
			openRuns++
			if s.OpenShareWorst == nil || *r.OpenShare > *s.OpenShareWorst {
				s.OpenShareWorst = ptr(*r.OpenShare)
				s.WorstUnit, s.WorstSeed = r.WorstUnit, r.Seed
			}
		}
		s.PastHold += r.PastHold
		for _, b := range r.Budgets {
			k, ok := budgetAt[b.Unit]
			if !ok {
				k = len(s.Budgets)
				budgetAt[b.Unit] = k
				s.Budgets = append(s.Budgets, seedBudget{Unit: b.Unit})
			}
			sb := &s.Budgets[k]
			sb.Runs++
			sb.False += b.False
			sb.Expected += b.Expected
			sb.Allowed += targetBudgetFactor * b.Budget * r.TestDays
			if b.WithinFactor2 {
				sb.WithinFactor2++
			}
		}
	}
	if s.Runs > 0 {
		s.Detected /= float64(s.Runs)
		s.Isolated /= float64(s.Runs)
	}
	if falseRuns > 0 {
		s.FalsePerDay = ptr(falseSum / float64(falseRuns))
	}
	if openRuns > 0 {
		s.OpenShareMean = ptr(openSum / float64(openRuns))
	}
	for i := range s.Budgets {
		s.Budgets[i].Pooled = float64(s.Budgets[i].False) <= s.Budgets[i].Allowed
	}
	return s
}

func ptr[T any](v T) *T { return &v }

// suiteRunner runs one plant (already set to its seed) in dir; the suite
// uses runSuitePlant, tests a stand-in.
type suiteRunner func(ctx context.Context, dir string, p suitePlant, opt suiteOptions) suiteRow

// seedRun is one run of the suite over seeds: a plant on one seed.
type seedRun struct {
	plant int // index in the plants
	seed  uint64
}

// runSeedRuns runs every plant on its n seeds with jobs runs at once
// (GOMAXPROCS when jobs ≤ 0), each in dir/<plant>/<seed> (removed after
// the run when keep is false), and returns the rows in plant order, then
// seed order, whatever order they finished in. done, when set, is called
// after each run, serialised. It returns ctx's error when ctx ends first.
func runSeedRuns(ctx context.Context, dir string, plants []suitePlant, n, jobs int, keep bool, opt suiteOptions, run suiteRunner, done func()) ([]suiteRow, error) {
	var runs []seedRun
	for i, p := range plants {
		for _, seed := range suiteSeeds(p.s.Seed, n) {
			runs = append(runs, seedRun{i, seed})
		}
	}
	if jobs <= 0 {
		jobs = runtime.GOMAXPROCS(0)
	}
	rows := make([]suiteRow, len(runs))
	var next atomic.Int64 // the next run to start
	var wg sync.WaitGroup
	var mu sync.Mutex
	for range min(jobs, len(runs)) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				i := int(next.Add(1) - 1)
				if i >= len(runs) {
					return
				}
				r := runs[i]
				p := plants[r.plant]
				if err := ctx.Err(); err != nil {
					rows[i] = suiteRow{Plant: p.name, Seed: r.seed, Error: err.Error()}
					continue
				}
				s := p.s.Clone()
				s.Seed = r.seed
				d := filepath.Join(dir, p.name, strconv.FormatUint(r.seed, 10))
				rows[i] = run(ctx, d, suitePlant{p.name, s}, opt)
				if !keep {
					os.RemoveAll(d)
				}
				if done != nil {
					mu.Lock()
					done()
					mu.Unlock()
				}
			}
		}()
	}
	wg.Wait()
	return rows, ctx.Err()
}

// seedsReport is the JSON of "sim --suite --seeds N": every run's row, in
// plant then seed order, and each plant's summary.
type seedsReport struct {
	Seeds    int           `json:"seeds"`
	Settings string        `json:"settings"`
	Runs     []suiteRow    `json:"runs"`
	Summary  []seedSummary `json:"summary"`
}

// runSuiteSeeds runs the suite over n seeds per plant and prints the
// summary table (or, with --json, seedsReport). A run that fails is
// named by plant and seed in the table and in the returned error; the
// others are still summed up.
func runSuiteSeeds(ctx context.Context, env IO, opt suiteOptions, n int, run suiteRunner) error {
	plants, dir, cleanup, err := suiteSetup(opt)
	if err != nil {
		return err
	}
	defer cleanup()
	var done func()
	if isTerminal(env.Err) {
		bar := progressbar.NewOptions(n*len(plants), progressbar.OptionSetWriter(env.Err),
			progressbar.OptionSetDescription("suite over seeds: runs"), progressbar.OptionShowCount(),
			progressbar.OptionSetElapsedTime(true), progressbar.OptionSetPredictTime(true), progressbar.OptionClearOnFinish())
		done = func() { bar.Add(1) }
		defer bar.Finish()
	}
	rows, err := runSeedRuns(ctx, dir, plants, n, opt.jobs, opt.out != "", opt, run, done)
	if err != nil {
		return err
	}
	rep := seedsReport{Seeds: n, Settings: suiteSettings(opt), Runs: rows}
	for i, p := range plants {
		rep.Summary = append(rep.Summary, summariseSeeds(p.name, suiteSeeds(p.s.Seed, n), rows[i*n:(i+1)*n]))
	}
	var failed []error
	for _, r := range rows {
		if r.Error != "" {
			failed = append(failed, fmt.Errorf("plant %s seed %d: %s", r.Plant, r.Seed, r.Error))
		}
	}
	if opt.json {
		enc := json.NewEncoder(env.Out)
		enc.SetIndent("", "  ")
		if err := enc.Encode(rep); err != nil {
			return err
		}
	} else {
		printSuiteSeeds(env.Out, rep, failed)
	}
	return errors.Join(failed...)
}

// suiteSettings names the settings of a suite run.
func suiteSettings(opt suiteOptions) string {
	if opt.config != "" {
		return "settings of " + opt.config
	}
	return "default settings"
}

// suiteSetup loads the plants of --plants and returns the directory the
// suite writes them to: --out, or a temporary directory that cleanup
// removes.
func suiteSetup(opt suiteOptions) (plants []suitePlant, dir string, cleanup func(), err error) {
	if plants, err = suitePlants(opt.plants); err != nil {
		return nil, "", nil, err
	}
	if opt.out != "" {
		return plants, opt.out, func() {}, nil
	}
	if dir, err = os.MkdirTemp("", "modewatch-suite-"); err != nil {
		return nil, "", nil, err
	}
	return plants, dir, func() { os.RemoveAll(dir) }, nil
}

// printSuiteSeeds prints the table of the suite over seeds.
func printSuiteSeeds(w io.Writer, rep seedsReport, failed []error) {
	runs := "its shipped seed only"
	if rep.Seeds > 1 {
		runs = fmt.Sprintf("its shipped seed and the next %d (seed + k, k = 0…%d)", rep.Seeds-1, rep.Seeds-1)
	}
	fmt.Fprintf(w, "realism suite over seeds: each plant on %s, fitted on the normal days\n", runs)
	fmt.Fprintf(w, "and replayed on the test days of each, %s; alerts scored strictly. Invented plants.\n", rep.Settings)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	head := []string{"plant", "seeds", "runs", "detected", "isolated", "false/day"}
	for _, t := range suiteTargets {
		head = append(head, t.name)
	}
	head = append(head, "all", "open share mean", "worst (unit, seed)", "past hold")
	fmt.Fprintln(tw, strings.Join(head, "\t"))
	for _, s := range rep.Summary {
		cells := []string{s.Plant, seedRange(s.Seeds), fmt.Sprintf("%d", s.Runs)}
		if s.Runs == 0 {
			cells = append(cells, "error: every run failed")
			fmt.Fprintln(tw, strings.Join(cells, "\t"))
			continue
		}
		perDay := "–"
		if s.FalsePerDay != nil {
			perDay = fmt.Sprintf("%.2f", *s.FalsePerDay)
		}
		cells = append(cells, fmt.Sprintf("%.2f/%d", s.Detected, s.Episodes), fmt.Sprintf("%.2f/%d", s.Isolated, s.Episodes), perDay)
		for _, t := range s.Targets {
			if t.Runs == 0 {
				cells = append(cells, "–")
			} else {
				cells = append(cells, fmt.Sprintf("%d/%d", t.Met, t.Runs))
			}
		}
		mean, worst := "–", "–"
		if s.OpenShareMean != nil {
			mean = fmt.Sprintf("%.1f%%", 100**s.OpenShareMean)
			worst = fmt.Sprintf("%.1f%% (%s, %d)", 100**s.OpenShareWorst, s.WorstUnit, s.WorstSeed)
		}
		cells = append(cells, fmt.Sprintf("%d/%d", s.AllMet, s.Runs), mean, worst, fmt.Sprintf("%d", s.PastHold))
		fmt.Fprintln(tw, strings.Join(cells, "\t"))
	}
	tw.Flush()
	fmt.Fprintln(w, "detected, isolated: mean per run, of the plant's faults; false/day: mean over the runs. Targets, runs meeting it / runs it applies to:")
	fmt.Fprintln(w, "det, iso: detected, isolated (a faulty channel in the top three) of the faults; false: strict false alerts a day; open: every unit's alert open")
	fmt.Fprintln(w, "at most 3 % of its normal time; hold 0: no alert past its fault plus accept_after; delay: median delay (frames of 30 s or less only);")
	fmt.Fprintln(w, "budget ×2: every unit within a factor 2 of its budget; all: every target. open share: the largest unit's, mean over the runs and the worst run.")
	fmt.Fprintln(w, "past hold: alerts summed over the runs.")
	for _, s := range rep.Summary {
		if len(s.Budgets) == 0 {
			continue
		}
		parts := make([]string, len(s.Budgets))
		for i, b := range s.Budgets {
			pooled := "within"
			if !b.Pooled {
				pooled = "over"
			}
			parts[i] = fmt.Sprintf("%s %d counted, %.1f expected, %s ×2 (runs within ×2 %d/%d)", b.Unit, b.False, b.Expected, pooled, b.WithinFactor2, b.Runs)
		}
		fmt.Fprintf(w, "budget over the runs, %s: %s\n", s.Plant, strings.Join(parts, "; "))
	}
	for _, err := range failed {
		fmt.Fprintf(w, "error: %v\n", err)
	}
	fmt.Fprintln(w, "Advisory only: modewatch never acts on the plant; verify in the field and follow site procedures.")
}

// seedRange prints a run of consecutive seeds as first–last.
func seedRange(seeds []uint64) string {
	switch len(seeds) {
	case 0:
		return "–"
	case 1:
		return strconv.FormatUint(seeds[0], 10)
	}
	return fmt.Sprintf("%d–%d", seeds[0], seeds[len(seeds)-1])
}
