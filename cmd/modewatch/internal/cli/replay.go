package cli

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"slices"
	"sort"
	"strings"
	"sync"
	"time"

	"modewatch/alerts"
	"modewatch/alerts/sink"
	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/report"
	"modewatch/configs"
	"modewatch/stream"
)

func init() {
	register(command{name: "replay", args: "--input FILE... [--model MODEL] [--truth FILE] [--scores FILE] [--alerts FILE] [--json]",
		summary: "score a recorded log frame by frame, as the live service would", run: runReplay})
}

var replayHelp = `
Replay recorded line protocol through the same engine as the live service:
decode, map and align the readings into frames, score every frame of every
unit (T², SPE and φ against control limits, contributions by channel) and
run the alarm logic. Without a configuration, channels are auto-discovered
(measurement.tagvalues.field), each measurement is a unit, and the frame
period is inferred from the data.

Without --model each unit learns from the start (warm-up, then scoring while
adapting). With --model the units start from a fitted baseline and go on
adapting, frozen while an alert is active; --adapt=false holds the model
fixed. A fitted unit keeps the model settings it was fitted with,
  ` + strings.Join(pipeline.FixedSettings(), ", ") + `:
such flags, and such settings of the configuration changed from their
defaults, apply only to units the model file does not hold, and replay
says so on standard error.

Input "-" is standard input; files ending in .gz (or gzip content) are
decompressed. Bad lines are reported with file:line:column and counted; the
rest of the input is kept. Exit status: 0 done (even with some bad lines),
1 no usable data or an I/O failure, 2 usage or configuration error.

--json prints one object: frames, channels, lines {accepted, rejected, late,
duplicate} (late and duplicate count readings), units, modes {unit, id,
channels, loadings, variance_share}, alerts (count), frames_per_second and,
with --truth, metrics {episodes, detected, detection_rate, median_delay_s,
false_alerts, false_alerts_per_day, isolated_top3, units {unit, alerts,
false_alerts, alert_open_share_normal, longest_open_alert_s}, matches}.
Scoring is strict: an episode is detected only by an alert of a unit that
holds one of its channels, and an alert is false unless it starts inside an
episode of its own unit (± --grace). alert_open_share_normal is the share of
the unit's time outside its episodes (± grace) with an alert open.

--report DIR writes DIR/index.html and DIR/charts/*.svg, a report that
opens from disk without network access: the summary, per unit T², SPE and
φ against their limits with alerts and labelled episodes shaded, the
loadings of every mode, a heat map of the top contributing channels, and
the alerts with the episodes they matched.

--limits empirical:FILE sets each limit at the (1 − α) quantile of its
statistic over FILE (a log of normal operation) scored by the fitted
model; it needs --model and --adapt=false.

modewatch is advisory: alerts are prompts to look, not instructions.`

// runOutputs are the optional outputs shared by replay and fit.
type runOutputs struct {
	scores  string
	alerts  string
	quiet   bool
	maxErrs int
	// Hooks for the report, empirical limits and the progress bar
	// (label of the bar; "" draws none).
	onScore  func(u *pipeline.Unit, t time.Time)
	prepare  func(p *pipeline.Pipeline) error
	progress string
	keep     func(t time.Time) bool // frames to run (nil: all)
}

// register adds the flags of the error output that fit and replay share:
// --quiet and --max-errors.
func (o *runOutputs) register(fs *flag.FlagSet) {
	fs.BoolVar(&o.quiet, "quiet", false, "print only errors on standard error")
	fs.IntVar(&o.maxErrs, "max-errors", 20, "print at most `N` bad lines (all are counted)")
}

// parseInputs parses args into fs and appends the positional arguments
// to inputs, the --input files of fit and replay (registered on fs). No
// input at all is a usage error.
func parseInputs(fs *flag.FlagSet, args []string, inputs *listFlag) error {
	pos, err := parseAll(fs, args)
	if err != nil {
		return err
	}
	*inputs = append(*inputs, pos...)
	if len(*inputs) == 0 {
		return usagef("no input: give --input FILE (or - for standard input)")
	}
	return nil
}

func runReplay(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "replay", "--input FILE... [--model MODEL] [--truth FILE] [--scores FILE] [--alerts FILE] [--json]", replayHelp)
	var mf modelFlags
	mf.register(fs, true)
	var inputs listFlag
	var model, truth string
	var asJSON bool
	var out runOutputs
	var grace time.Duration
	fs.Var(&inputs, "input", "line-protocol `FILE` to replay (repeatable; also as arguments; - is stdin)")
	fs.StringVar(&model, "model", "", "start from the fitted `MODEL` file written by fit")
	fs.StringVar(&truth, "truth", "", "truth `FILE` of labelled episodes: adds detection metrics to --json")
	fs.DurationVar(&grace, "grace", evaluate.DefaultGrace, "an alert this close to an episode is not counted as false")
	fs.StringVar(&out.scores, "scores", "", "write one line-protocol score line per frame and unit to `FILE`")
	fs.StringVar(&out.alerts, "alerts", "", "write every alert record revision as JSON lines to `FILE`")
	fs.BoolVar(&asJSON, "json", false, "print a JSON summary on standard output")
	var reportDir string
	fs.StringVar(&reportDir, "report", "", "write a self-contained HTML report with SVG charts into `DIR` (DIR/index.html)")
	out.register(fs)
	if err := parseInputs(fs, args, &inputs); err != nil {
		return err
	}
	cfg, err := mf.load(fs)
	if err != nil {
		return err
	}
	var baseline *pipeline.ModelFile
	if model == "" {
		model = cfg.Model.File // the configuration's fitted model, unless --model says otherwise
	}
	if model != "" {
		if baseline, err = pipeline.ReadModel(model); err != nil {
			return usagef("--model: %v", err)
		}
		// Said, not silently dropped: the file's units keep the settings
		// they were fitted with.
		flagged := mf.fixedByModel()
		for _, name := range flagged {
			fmt.Fprintf(env.Err, "replay: --%s applies only to units the model file %s does not hold: its units keep the setting they were fitted with (fit again to change it)\n", configs.LookupSetting(name).Flag(), model)
		}
		for _, k := range baseline.Kept(cfg) {
			if !slices.Contains(flagged, k.Name) {
				fmt.Fprintf(env.Err, "replay: %s\n", keptMessage(k, model))
			}
		}
	}
	if out.prepare, err = empiricalLimits(cfg, baseline); err != nil {
		return err
	}
	out.progress = "replay"
	var tr *evaluate.Truth
	if truth != "" {
		if tr, err = evaluate.ReadTruth(truth); err != nil {
			return usagef("--truth: %v", err)
		}
	}
	var col *report.Collector
	if reportDir != "" {
		col = report.NewCollector()
		out.onScore = col.Observe
	}
	res, rec, err := runEngine(ctx, env, cfg, inputs, baseline, false, false, out)
	if res == nil {
		return err
	}
	sum := summarize(res, rec)
	if tr != nil {
		m := score(res, rec, sum, tr.Episodes, grace, holdOf(cfg))
		sum.Metrics = &m
	}
	if reportDir != "" {
		if rerr := writeReport(env, reportDir, inputs, sum, res, rec, tr, grace, col, out.quiet); rerr != nil && err == nil {
			err = rerr
		}
	}
	if asJSON {
		enc := json.NewEncoder(env.Out)
		enc.SetIndent("", "  ")
		if jerr := enc.Encode(sum); jerr != nil && err == nil {
			err = jerr
		}
	} else {
		printSummary(env.Out, sum)
	}
	if err == nil && sum.Frames == 0 {
		err = fmt.Errorf("%w: %d lines read, %d rejected", pipeline.ErrNoData, sum.Lines.Total, sum.Lines.Rejected)
	}
	return err
}

// recorder keeps what the alarm engine published.
type recorder struct {
	mu    sync.Mutex
	last  map[string]*alerts.Record // latest revision per record id
	order []string
	lines *sink.Lines
	err   error
}

func (r *recorder) Publish(rec *alerts.Record) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if _, seen := r.last[rec.ID]; !seen {
		r.order = append(r.order, rec.ID)
	}
	r.last[rec.ID] = rec
	if r.lines != nil && r.err == nil {
		m, err := sink.MessageOf(rec)
		if err == nil {
			err = r.lines.Deliver(context.Background(), m)
		}
		r.err = err
	}
}

// incidents returns the latest revision of every incident record (floods
// excluded: their members are incidents themselves; notices are not
// alerts), by start time.
func (r *recorder) incidents() []*alerts.Record {
	r.mu.Lock()
	defer r.mu.Unlock()
	var out []*alerts.Record
	for _, id := range r.order {
		if rec := r.last[id]; rec.Kind == alerts.KindIncident {
			out = append(out, rec)
		}
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Start.Before(out[j].Start) })
	return out
}

func (r *recorder) floods() int {
	r.mu.Lock()
	defer r.mu.Unlock()
	n := 0
	for _, rec := range r.last {
		if rec.Kind == alerts.KindFlood {
			n++
		}
	}
	return n
}

// score scores the recorded alerts strictly against the episodes (see
// evaluate.Compute), each channel in the unit the replay put it in.
func score(res *pipeline.ReplayResult, rec *recorder, sum *summary, episodes []evaluate.Episode, grace time.Duration,
	hold func(string) time.Duration) evaluate.Metrics {
	var from, to time.Time
	if sum.From != nil {
		from, to = *sum.From, sum.From.Add(sum.span)
	}
	run := scoreRun(res.Pipeline.Views(), from, to, grace)
	run.Hold = hold
	return evaluate.Compute(evaluate.AlertsOf(rec.incidents()), episodes, run)
}

// holdOf returns each unit's bounded hold under cfg (alerts.accept_after,
// the alarm engine's default when unset) for the scorer's hold check.
func holdOf(cfg *configs.Config) func(string) time.Duration {
	return func(unit string) time.Duration {
		if h := cfg.AlertsFor(unit).AcceptAfter; h != 0 {
			return h
		}
		return alerts.DefaultAcceptAfter
	}
}

// scoreRun is the scorer's view of a run over [from, to): the units of the
// pipeline and the unit of each of their channels.
func scoreRun(views []pipeline.UnitView, from, to time.Time, grace time.Duration) evaluate.Run {
	unitOf := map[string]string{}
	var units []string
	for _, v := range views {
		units = append(units, v.Name)
		for _, c := range v.Channels {
			unitOf[c] = v.Name
		}
		for _, c := range v.NotModelled {
			unitOf[c] = v.Name
		}
	}
	return evaluate.Run{From: from, To: to, Grace: grace, Units: units, UnitOf: func(ch string) string { return unitOf[ch] }}
}

// bufferedFile is a file written through a buffer of its own.
type bufferedFile struct {
	*bufio.Writer
	f *os.File
}

// createBuffered creates (or truncates) the file at path, written through
// a buffer of size bytes.
func createBuffered(path string, size int) (*bufferedFile, error) {
	f, err := os.Create(path)
	if err != nil {
		return nil, err
	}
	return &bufferedFile{Writer: bufio.NewWriterSize(f, size), f: f}, nil
}

// Close writes out the buffer and closes the file; it returns the first
// error of the two.
func (b *bufferedFile) Close() error {
	err := b.Flush()
	if cerr := b.f.Close(); err == nil {
		err = cerr
	}
	return err
}

// runEngine runs the pipeline over the inputs with the shared outputs.
func runEngine(ctx context.Context, env IO, cfg *configs.Config, inputs []string, baseline *pipeline.ModelFile, fit, fitHalfLife bool, out runOutputs) (*pipeline.ReplayResult, *recorder, error) {
	log := newLogger(env.Err, cfg, out.quiet)
	rec := &recorder{last: map[string]*alerts.Record{}}
	if out.alerts != "" {
		bw, err := createBuffered(out.alerts, 64<<10)
		if err != nil {
			return nil, nil, err
		}
		defer bw.Close()
		rec.lines = sink.NewLines(bw)
	}
	var onScore func(u *pipeline.Unit, t time.Time)
	var scoreErr error
	if out.scores != "" {
		bw, err := createBuffered(out.scores, 256<<10)
		if err != nil {
			return nil, nil, err
		}
		defer bw.Close()
		var enc pipeline.ScoreEncoder
		onScore = func(u *pipeline.Unit, t time.Time) {
			enc.Reset()
			b := enc.Append(u, t)
			if err := enc.Err(); err != nil {
				if scoreErr == nil {
					scoreErr = fmt.Errorf("--scores: unit %q: %w", u.Name, err)
				}
				return
			}
			if _, err := bw.Write(b); err != nil && scoreErr == nil {
				scoreErr = fmt.Errorf("--scores: %w", err)
			}
		}
	}
	if extra := out.onScore; extra != nil {
		if prev := onScore; prev != nil {
			onScore = func(u *pipeline.Unit, t time.Time) { prev(u, t); extra(u, t) }
		} else {
			onScore = extra
		}
	}
	var readInput func(ctx context.Context, in *stream.Intake, name string) error
	if out.progress != "" {
		if prog := newFileProgress(env, out.quiet, out.progress, inputs); prog != nil {
			defer prog.finish()
			readInput = prog.readInput
		}
	}
	printed := 0
	onLineError := func(err error) {
		printed++
		if printed <= out.maxErrs {
			fmt.Fprintln(env.Err, strings.TrimPrefix(err.Error(), "stream: "))
		} else if printed == out.maxErrs+1 {
			fmt.Fprintf(env.Err, "(more bad lines are counted but not printed; see --max-errors)\n")
		}
	}
	res, err := pipeline.Replay(ctx, pipeline.ReplayOptions{
		Config: cfg, Inputs: inputs, Stdin: env.In, Baseline: baseline, Fit: fit, FitHalfLife: fitHalfLife,
		Publisher: rec, OnScore: onScore, OnLineError: onLineError, Log: log,
		Prepare: out.prepare, ReadInput: readInput, Keep: out.keep,
	})
	if err == nil {
		err = scoreErr
	}
	if err == nil {
		err = rec.err
	}
	if err != nil && errors.Is(err, stream.ErrHandler) {
		err = fmt.Errorf("scoring stopped: %w", err)
	}
	return res, rec, err
}

// newLogger returns the command's logger: text on standard error at the
// configured level (warnings only with --quiet).
func newLogger(w io.Writer, cfg *configs.Config, quiet bool) *slog.Logger {
	level := slog.LevelInfo
	switch cfg.Log.Level {
	case "debug":
		level = slog.LevelDebug
	case "warn":
		level = slog.LevelWarn
	case "error":
		level = slog.LevelError
	}
	if quiet && level < slog.LevelWarn {
		level = slog.LevelWarn
	}
	opts := &slog.HandlerOptions{Level: level}
	if cfg.Log.Format == "json" {
		return slog.New(slog.NewJSONHandler(w, opts))
	}
	return slog.New(slog.NewTextHandler(w, opts))
}
