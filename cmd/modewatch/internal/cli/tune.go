package cli

import (
	"bytes"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"sync"
	"time"

	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/store"
	"modewatch/cmd/modewatch/internal/tune"
	"modewatch/configs"
)

func init() {
	register(command{name: "tune", args: "--input FILE... --truth FILE --grid FILE [--model MODEL] [--out DIR]",
		summary: "search model and alarm settings against labelled incidents", run: runTune})
}

const tuneHelp = `
Search model and alarm settings against labelled incidents: replay the log
once for every combination of a grid of settings, in parallel on all cores,
score each replay against the truth file (the metrics of replay --truth),
and print the ranked table with the Pareto front marked (*).

Writes DIR/tune.csv (every combination, ranked) and DIR/best.yaml (the
best setting as a configuration snippet that "modewatch check" accepts).

The grid file is YAML: a list of values per setting; settings left out
keep the value of --config and the flags. Keys: sparsity, modes, halflife,
alpha, warmup, refresh_every, on_delay ("N/M"), off_delay, deadband, adapt.
Example:

  sparsity: [none, "l0:4", "l0:6"]
  modes:    [3, 5]
  halflife: [3d, 7d]
  alpha:    [0.01, 0.001]
  on_delay: ["3/5", "8/10"]

The whole grid and every combination are checked, with line numbers,
before any replay starts. With --model the units start from the fitted
model and keep its settings, so the grid may list only the alarm settings
and adapt.

Each combination is a complete replay of the inputs, read from the files
again by each worker (nothing but the results is kept in memory), through
exactly the code of "modewatch replay": the metrics are those replay
--truth --json reports for the same settings. Standard input cannot be
read more than once and is not accepted.

` + tune.RankRule

func runTune(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "tune", "--input FILE... --truth FILE --grid FILE [--model MODEL] [--out DIR]", tuneHelp)
	var mf modelFlags
	mf.register(fs, true)
	var inputs listFlag
	var model, truth, gridFile, outDir string
	var grace time.Duration
	var jobs, top int
	var maxFalse float64
	var quiet bool
	fs.Var(&inputs, "input", "line-protocol `FILE` to replay (repeatable; also as arguments)")
	fs.StringVar(&truth, "truth", "", "truth `FILE` of labelled episodes (required)")
	fs.StringVar(&gridFile, "grid", "", "grid `FILE` (YAML) of settings to search (required)")
	fs.StringVar(&model, "model", "", "start every replay from the fitted `MODEL` file")
	fs.StringVar(&outDir, "out", "modewatch-tune", "write tune.csv and best.yaml into `DIR`")
	fs.DurationVar(&grace, "grace", evaluate.DefaultGrace, "an alert this close to an episode is not counted as false")
	fs.Float64Var(&maxFalse, "max-false-per-day", 1, "false-alert budget per day used by the ranking")
	fs.IntVar(&jobs, "jobs", runtime.GOMAXPROCS(0), "replays run at once")
	fs.IntVar(&top, "top", 20, "print the best `N` rows (0: all); the CSV has every row")
	fs.BoolVar(&quiet, "quiet", false, "print only the table and errors")
	pos, err := parseAll(fs, args)
	if err != nil {
		return err
	}
	inputs = append(inputs, pos...)
	switch {
	case len(inputs) == 0:
		return usagef("no input: give --input FILE")
	case truth == "":
		return usagef("--truth FILE is required")
	case gridFile == "":
		return usagef("--grid FILE is required")
	case jobs < 1:
		return usagef("--jobs must be at least 1")
	case !(maxFalse >= 0):
		return usagef("--max-false-per-day must not be negative")
	}
	for _, in := range inputs {
		if in == "-" {
			return usagef("standard input cannot be replayed more than once; write it to a file first")
		}
		if _, err := os.Stat(in); err != nil {
			return usagef("--input: %v", err)
		}
	}
	// Everything is checked before the first replay: grid, configuration,
	// truth, model and every combination.
	plan, err := planTune(env, fs, &mf, gridFile, truth, model)
	if err != nil {
		return err
	}
	settings, base, tr, baseline := plan.settings, plan.base, plan.truth, plan.baseline
	if err := os.MkdirAll(outDir, 0o755); err != nil {
		return err
	}
	if !quiet {
		fmt.Fprintf(env.Err, "tune: %d settings × %d input file(s), %d at once\n", len(settings), len(inputs), min(jobs, len(settings)))
	}

	prog := newCountProgress(env, quiet, "tune", len(settings))
	start := time.Now()
	slow := newSlowWatch(env, quiet, slowAfter)
	defer slow.stop()
	eval := func(ctx context.Context, s tune.Setting) tune.Result {
		cfg := s.Apply(base)
		done := slow.begin(s.String())
		m, frames, alerts, lines, err := replayMetrics(ctx, cfg, inputs, baseline, tr, grace)
		done()
		prog.add("tune", lines)
		r := tune.Result{Metrics: m, Frames: frames, Alerts: alerts}
		if err != nil {
			r.Err = err.Error()
		}
		return r
	}
	results, runErr := tune.Run(ctx, settings, jobs, eval, nil)
	prog.finish()
	ranked := tune.Rank(results, maxFalse)

	best, err := writeTune(env, ranked, tuneOutput{dir: outDir, top: top, quiet: quiet, maxFalse: maxFalse, start: start,
		note: func(best *tune.Result) []string {
			return snippetNote(best, len(ranked), inputs, truth, mf.config, grace, maxFalse)
		}})
	if err != nil {
		return err
	}
	if runErr != nil {
		return runErr
	}
	if best.Err != "" {
		return fmt.Errorf("no setting could be replayed; first error: %s", best.Err)
	}
	return nil
}

// tunePlan is what tune checked before its first replay.
type tunePlan struct {
	settings []tune.Setting
	base     *configs.Config
	truth    *evaluate.Truth
	baseline *pipeline.ModelFile // nil without --model
}

// planTune reads and checks the grid, the configuration, the truth and the
// model, and checks that every combination of the grid is a valid setting.
func planTune(env IO, fs *flag.FlagSet, mf *modelFlags, gridFile, truth, model string) (*tunePlan, error) {
	grid, err := tune.ReadGrid(gridFile)
	if err != nil {
		var es configs.Errors
		if errors.As(err, &es) {
			for _, e := range es {
				fmt.Fprintln(env.Err, e)
			}
			return nil, configError{fmt.Errorf("%s: %d problem(s)", gridFile, len(es))}
		}
		return nil, usagef("--grid: %v", err)
	}
	base, err := mf.load(fs)
	if err != nil {
		return nil, err
	}
	tr, err := evaluate.ReadTruth(truth)
	if err != nil {
		return nil, usagef("--truth: %v", err)
	}
	var baseline *pipeline.ModelFile
	if model != "" {
		if baseline, err = pipeline.ReadModel(model); err != nil {
			return nil, usagef("--model: %v", err)
		}
		var listed []string
		for _, ax := range grid.Axes {
			if tune.ModelKeys[ax.Key] {
				listed = append(listed, fmt.Sprintf("%s:%d: %s", gridFile, ax.Line, ax.Key))
			}
		}
		if len(listed) > 0 {
			return nil, usagef("with --model the units keep the settings they were fitted with; the grid may list only on_delay, off_delay, deadband and adapt, not:\n  %s",
				strings.Join(listed, "\n  "))
		}
	}
	settings := grid.Settings()
	var problems []string
	for _, s := range settings {
		c := s.Apply(base)
		if err := c.Validate(); err != nil {
			problems = append(problems, fmt.Sprintf("%s: %v", s, err))
			continue
		}
		if _, err := empiricalLimits(c, baseline); err != nil {
			problems = append(problems, fmt.Sprintf("%s: %v", s, err))
		}
	}
	if len(problems) > 0 {
		if len(problems) > 10 {
			problems = append(problems[:10], fmt.Sprintf("... and %d more", len(problems)-10))
		}
		return nil, usagef("%d combination(s) of the grid are not valid settings:\n  %s", len(problems), strings.Join(problems, "\n  "))
	}
	return &tunePlan{settings: settings, base: base, truth: tr, baseline: baseline}, nil
}

// tuneOutput says where and how tune writes its results.
type tuneOutput struct {
	dir      string
	top      int
	quiet    bool
	maxFalse float64
	start    time.Time
	note     func(best *tune.Result) []string // the comment of best.yaml
}

// writeTune writes tune.csv (every row) and best.yaml (rank 1, unless it
// failed) into out.dir, prints the table of the best out.top rows and a
// summary, and returns rank 1.
func writeTune(env IO, ranked []tune.Result, out tuneOutput) (*tune.Result, error) {
	var csvBuf bytes.Buffer
	if err := tune.WriteCSV(&csvBuf, ranked); err != nil {
		return nil, err
	}
	csvPath := filepath.Join(out.dir, "tune.csv")
	if err := store.WriteFile(csvPath, csvBuf.Bytes(), 0o644); err != nil {
		return nil, err
	}
	best := &ranked[0]
	var snip bytes.Buffer
	if err := tune.WriteSnippet(&snip, best, out.note(best)); err != nil {
		return nil, err
	}
	bestPath := filepath.Join(out.dir, "best.yaml")
	if best.Err == "" {
		if err := store.WriteFile(bestPath, snip.Bytes(), 0o644); err != nil {
			return nil, err
		}
	}
	if err := tune.WriteTable(env.Out, ranked, out.top); err != nil {
		return nil, err
	}
	meet := 0
	for i := range ranked {
		if tune.Meets(&ranked[i], out.maxFalse) {
			meet++
		}
	}
	if !out.quiet {
		fmt.Fprintf(env.Out, "%d of %d settings detect every episode with at most %g false alert(s) per day; %s elapsed\n",
			meet, len(ranked), out.maxFalse, time.Since(out.start).Round(100*time.Millisecond))
		fmt.Fprintf(env.Out, "wrote %s", csvPath)
		if best.Err == "" {
			fmt.Fprintf(env.Out, " and %s (rank 1)", bestPath)
		}
		fmt.Fprintln(env.Out)
		fmt.Fprintln(env.Out, "Advisory only: settings found on past incidents are a starting point; verify in the field and follow site procedures.")
	}
	return best, nil
}

// replayMetrics replays the inputs under cfg through the replay command's
// engine and scores the alerts against the truth exactly as replay --truth
// does.
func replayMetrics(ctx context.Context, cfg *configs.Config, inputs []string, baseline *pipeline.ModelFile, tr *evaluate.Truth, grace time.Duration) (m evaluate.Metrics, frames uint64, alerts int, lines uint64, err error) {
	prepare, err := empiricalLimits(cfg, baseline)
	if err != nil {
		return m, 0, 0, 0, err
	}
	env := IO{Err: io.Discard}
	res, rec, err := runEngine(ctx, env, cfg, inputs, baseline, false, false, runOutputs{quiet: true, prepare: prepare})
	if res == nil {
		return m, 0, 0, 0, err
	}
	sum := summarize(res, rec)
	if err == nil && sum.Frames == 0 {
		err = fmt.Errorf("%w: %d lines read, %d rejected", pipeline.ErrNoData, sum.Lines.Total, sum.Lines.Rejected)
	}
	m = score(res, rec, sum, tr.Episodes, grace, holdOf(cfg))
	return m, sum.Frames, sum.Alerts, sum.Lines.Total, err
}

// snippetNote is the comment block of best.yaml.
func snippetNote(best *tune.Result, n int, inputs []string, truth, config string, grace time.Duration, maxFalse float64) []string {
	m := best.Metrics
	note := []string{
		fmt.Sprintf("modewatch tune: rank 1 of %d settings.", n),
		fmt.Sprintf("Replayed %s against %s (grace %s, budget %g false alert(s) per day).", strings.Join(inputs, ", "), truth, grace, maxFalse),
	}
	if config != "" {
		note = append(note, fmt.Sprintf("Base configuration: %s; these keys were laid over it and over every unit.", config))
	}
	if best.Err == "" {
		res := fmt.Sprintf("Result: %d of %d episodes detected", m.Detected, m.Episodes)
		if m.FalseAlertsPerDay != nil {
			res += fmt.Sprintf(", %.2f false alerts per day", *m.FalseAlertsPerDay)
		}
		if m.MedianDelayS != nil {
			res += fmt.Sprintf(", median delay %s", time.Duration(*m.MedianDelayS*float64(time.Second)).Round(time.Second))
		}
		res += fmt.Sprintf(", %d isolated in the top 3.", m.IsolatedTop3)
		note = append(note, res)
	}
	note = append(note,
		"Merge into a configuration (a unit's own override of the same key wins there);",
		"check with: modewatch check --config FILE",
		"modewatch is advisory: safety decisions follow site procedures, local codes and licensed practice.",
	)
	return note
}

// slowAfter is how long one setting may replay before tune names it on
// standard error: a setting that takes far longer than the others points
// at a model that struggles (or a defect) and the user should know which.
const slowAfter = 2 * time.Minute

// slowWatch names settings whose replay runs longer than after, once each.
type slowWatch struct {
	out     io.Writer
	after   time.Duration
	now     func() time.Time // the clock of begin (tests set it)
	mu      sync.Mutex
	running map[string]time.Time
	told    map[string]bool
	quit    chan struct{}
	wg      sync.WaitGroup
}

func newSlowWatch(env IO, quiet bool, after time.Duration) *slowWatch {
	w := &slowWatch{out: env.Err, after: after, now: time.Now, running: map[string]time.Time{}, told: map[string]bool{}, quit: make(chan struct{})}
	if quiet {
		return w
	}
	w.wg.Add(1)
	go func() {
		defer w.wg.Done()
		t := time.NewTicker(after / 4)
		defer t.Stop()
		for {
			select {
			case <-w.quit:
				return
			case now := <-t.C:
				w.check(now)
			}
		}
	}()
	return w
}

// check names, once each, the settings running for after or longer at
// now.
func (w *slowWatch) check(now time.Time) {
	w.mu.Lock()
	defer w.mu.Unlock()
	for name, since := range w.running {
		if d := now.Sub(since); d >= w.after && !w.told[name] {
			w.told[name] = true
			fmt.Fprintf(w.out, "tune: still replaying %s after %s\n", name, d.Round(time.Second))
		}
	}
}

// begin notes that the setting called name starts; the returned func
// notes its end.
func (w *slowWatch) begin(name string) func() {
	w.mu.Lock()
	w.running[name] = w.now()
	w.mu.Unlock()
	return func() {
		w.mu.Lock()
		delete(w.running, name)
		w.mu.Unlock()
	}
}

func (w *slowWatch) stop() {
	close(w.quit)
	w.wg.Wait()
}
