package cli

import (
	"bytes"
	"context"
	_ "embed"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/service"
	"modewatch/configs"
	"modewatch/sim"
	"modewatch/stream"
)

func init() {
	register(command{name: "demo", args: "[--duration D] [--listen ADDR]", summary: "the invented plant, an embedded message server, the service and its HTTP API, in one command", run: runDemo})
}

const demoHelp = `
Run the shipped demo: an invented utility block of four units and 50
channels (configs/scenario-demo.yaml). The simulated normal days before
the scenario's split (four days of normal operation) are fitted offline, in
a few seconds; then the service starts with an embedded NATS server and its
HTTP API, and the simulator publishes the two test days after the split,
with seven labelled faults, in live mode at a speed-up. A compact summary
shows, per unit, T² and SPE against their limits and the open alerts with
their top sensors. At the end the alerts are scored against the labels.

The model and alarm settings are the defaults (the first lines of the
output name them), with each unit's limits calibrated to alerts.budget on
the normal days as fit does; configs/demo.yaml (embedded in the binary)
only sets the sample period, the embedded server and the intake queue.

Needs no configuration and no network. Data (model, checkpoints, spool)
goes to a temporary directory unless --state-dir is given. The data is
invented. modewatch is advisory: it never acts on the plant.`

// demoYAML is the demo's service configuration, configs/demo.yaml (the
// copy embedded here is kept identical by TestDemoConfigCopyIdentical; the
// package cannot embed a file outside its directory). It holds no model
// or alarm settings: the demo runs with the defaults.
//
//go:embed demo.yaml
var demoYAML []byte

// demoConfigName is the name demo configuration problems are reported under.
const demoConfigName = "configs/demo.yaml"

// demoConfig returns the demo's configuration (configs/demo.yaml) with the
// HTTP API on listen (another free port if it is taken) and all its data
// (model, checkpoints, JetStream store, spool) in stateDir.
func demoConfig(listen, stateDir string) (*configs.Config, error) {
	cfg, err := configs.Parse(demoConfigName, demoYAML)
	if err != nil {
		return nil, fmt.Errorf("the embedded demo configuration: %w", err)
	}
	cfg.HTTP.Listen = freeListen(listen)
	// Everything the demo writes goes under stateDir: the defaults that
	// derive from state_dir (the delivery spool) are filled in again.
	cfg.StateDir = stateDir
	cfg.Delivery.SpoolDir = ""
	cfg.ApplyDefaults()
	return cfg, nil
}

// demoSettings describes the model and alarm settings of cfg in one line.
func demoSettings(cfg *configs.Config) string {
	return fmt.Sprintf("sparsity %s, modes %s, statistics %s, alerts.budget %g false alerts per unit per day, alarm after %d of %d frames over a limit, off-delay %s",
		cfg.Model.Sparsity, cfg.Model.Modes, cfg.Model.Statistics, cfg.Alerts.Budget, cfg.Alerts.OnDelay.N, cfg.Alerts.OnDelay.M, cfg.Alerts.OffDelay)
}

// demoOptions are the demo's flags.
type demoOptions struct {
	duration time.Duration // wall clock; 0: until the two test days are sent
	listen   string
	stateDir string // "" for a temporary directory
	speed    float64
	quiet    bool
}

// demoOutcome is what a demo run measured, for tests.
type demoOutcome struct {
	metrics    evaluate.Metrics // the alerts against the labelled faults that started
	span       time.Duration    // event time scored
	frames     uint64           // frames scored per unit
	linesSent  uint64           // line-protocol lines the simulator published
	linesTaken uint64           // of them, lines the service received
}

func runDemo(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "demo", "[--duration D] [--listen ADDR] [--speed X]", demoHelp)
	var opt demoOptions
	fs.DurationVar(&opt.duration, "duration", 0, "stop after this long (wall clock); default: when the two simulated test days have been sent")
	fs.StringVar(&opt.listen, "listen", configs.DefaultListen, "`ADDR` of the HTTP API (another free port is used if it is taken)")
	fs.Float64Var(&opt.speed, "speed", 1440, "simulated seconds per second (1440: a day per minute)")
	fs.StringVar(&opt.stateDir, "state-dir", "", "keep the demo's data in `DIR` instead of a temporary directory")
	fs.BoolVar(&opt.quiet, "quiet", false, "no live summary, only the final report")
	pos, err := parseAll(fs, args)
	if err != nil {
		return err
	}
	if len(pos) > 0 {
		return usagef("unexpected arguments %q", pos)
	}
	if !(opt.speed > 0) {
		return usagef("--speed must be above 0")
	}
	if opt.duration < 0 {
		return usagef("--duration must not be negative")
	}
	_, err = runDemoWith(ctx, env, opt)
	return err
}

// runDemoWith runs the demo with parsed options and returns what it
// measured (also printed on env.Out).
func runDemoWith(ctx context.Context, env IO, opt demoOptions) (demoOutcome, error) {
	var oc demoOutcome
	stateDir := opt.stateDir
	if stateDir == "" {
		dir, err := os.MkdirTemp("", "modewatch-demo-")
		if err != nil {
			return oc, err
		}
		defer os.RemoveAll(dir)
		stateDir = dir
	} else if err := os.MkdirAll(stateDir, 0o755); err != nil {
		return oc, fmt.Errorf("--state-dir: %w", err)
	}
	cfg, err := demoConfig(opt.listen, stateDir)
	if err != nil {
		return oc, err
	}
	sc, err := sim.Demo()
	if err != nil {
		return oc, err
	}
	if cfg.Frames.Period != sc.Period {
		return oc, fmt.Errorf("%s: frames.period %s differs from the demo plant's sample period %s", demoConfigName, cfg.Frames.Period, sc.Period)
	}
	w := env.Out
	fmt.Fprintln(w, "modewatch demo: an invented plant (4 units, 50 channels), simulated; no real equipment is involved.")
	fmt.Fprintln(w, service.Caution)
	fmt.Fprintf(w, "settings: the defaults (%s only sets the period, the embedded server and the queue): %s.\n", demoConfigName, demoSettings(cfg))
	fmt.Fprintln(w)

	// 1. Learn normal operation from the fault-free days before the split.
	log := newLogger(env.Err, cfg, true)
	modelPath, err := demoFit(ctx, env, cfg, sc, stateDir, log)
	if err != nil {
		return oc, err
	}

	// 2. The service, from that model.
	cfg.Model.File = modelPath
	board := newBoard()
	svc, err := service.Start(ctx, service.Options{Config: cfg, Log: log, Stdout: io.Discard, OnScore: board.score})
	if err != nil {
		return oc, err
	}
	defer func() {
		sctx, cancel := context.WithTimeout(context.Background(), cfg.ShutdownTimeout)
		defer cancel()
		_ = svc.Shutdown(sctx)
	}()
	info := svc.Info()
	fmt.Fprintf(w, "2. service running with an embedded NATS server at %s\n", info.NATS)
	fmt.Fprintf(w, "   status page: %s/  (open it in a browser)\n", info.HTTP)
	fmt.Fprintf(w, "   HTTP API:  %s/api/units   %s/api/alerts   %s/metrics   %s/healthz\n", info.HTTP, info.HTTP, info.HTTP, info.HTTP)
	fmt.Fprintf(w, "   subjects:  readings modewatch.readings.<unit>, alerts %s, scores %s\n", info.Alerts, info.Scores)
	fmt.Fprintf(w, "   state:     %s\n", stateDir)

	// 3. The test days after the split, live.
	live := sc.Tested()
	nc, err := nats.Connect(info.NATS, nats.Name("modewatch-demo-plant"))
	if err != nil {
		return oc, err
	}
	defer nc.Close()
	fmt.Fprintf(w, "3. publishing %s of simulated plant (%s to %s, 7 labelled faults) at %gx", live.Duration,
		live.Start.Format("Jan 2 15:04"), live.End().Format("Jan 2 15:04"), opt.speed)
	if opt.duration > 0 {
		fmt.Fprintf(w, " for %s", opt.duration)
	}
	fmt.Fprintf(w, "; Ctrl-C stops\n\n")

	sent, lines, err := demoPublish(ctx, env, opt, live, nc, cfg.Server.Prefix, board, svc)
	if err != nil {
		return oc, err
	}
	tty := isTerminal(env.Out)
	// Let the service score what it has received: every line sent (one
	// per asset and sample), or until it stops making progress.
	assets := 0
	for _, u := range live.Units {
		assets += len(u.Assets)
	}
	oc.linesSent = uint64(sent.Samples) * uint64(assets)
	oc.linesTaken = waitIntake(ctx, svc.Intake(), oc.linesSent)
	if !opt.quiet {
		if tty && lines > 0 {
			fmt.Fprintf(w, "\x1b[%dA\x1b[J", lines)
		}
		fmt.Fprint(w, board.render(svc.Records()))
	}

	// 4. Report against the labels.
	demoReport(w, svc, sc, live, opt.speed, &oc)
	fmt.Fprintf(w, "\nThe detection settings are the defaults, chosen on the realism suite (modewatch sim --suite), not on\n")
	fmt.Fprintln(w, "this plant's labelled faults. The plant offline with the same settings (sim writes all its days as one run, so")
	fmt.Fprintln(w, "the test days differ in detail from the ones published here, and so do the figures):")
	fmt.Fprintln(w, "  modewatch sim --out demo;")
	fmt.Fprintf(w, "  modewatch fit --config %s --out demo/model.json demo/normal.lp;\n", demoConfigName)
	fmt.Fprintf(w, "  modewatch replay --config %s --model demo/model.json --truth demo/truth.json demo/test.lp\n", demoConfigName)
	fmt.Fprintln(w, service.Caution)
	return oc, nil
}

// demoFit fits the demo's model on the fault-free normal days of sc (the
// samples before its split) and writes it in stateDir; it returns the
// model file's path.
func demoFit(ctx context.Context, env IO, cfg *configs.Config, sc *sim.Scenario, stateDir string, log *slog.Logger) (string, error) {
	w := env.Out
	normal := sc.Normal()
	var buf bytes.Buffer
	if err := normal.WriteLineProtocol(&buf); err != nil {
		return "", err
	}
	// The log goes to a file: the budget calibration reads it twice.
	normalPath := filepath.Join(stateDir, "demo-normal.lp")
	if err := os.WriteFile(normalPath, buf.Bytes(), 0o644); err != nil {
		return "", err
	}
	fitStart := time.Now()
	res, err := pipeline.Replay(ctx, pipeline.ReplayOptions{Config: cfg, Inputs: []string{normalPath}, Fit: true, Log: log})
	if err != nil {
		return "", fmt.Errorf("fitting the normal days: %w", err)
	}
	model, err := res.Pipeline.Baseline()
	if err != nil {
		return "", fmt.Errorf("fitting the normal days: %w", err)
	}
	// As fit does: each unit's limits calibrated to alerts.budget on the
	// held-out part of the normal days.
	calNotes := calibrateBudgets(ctx, IO{In: env.In, Out: io.Discard, Err: env.Err}, cfg, []string{normalPath}, modelFlags{}, model)
	modelPath := filepath.Join(stateDir, "demo-model.json")
	if err := pipeline.WriteModel(modelPath, model); err != nil {
		return "", err
	}
	nModes, nCal := 0, 0
	for _, u := range model.Units {
		nModes += len(u.Modes)
		if u.Calibration != nil {
			nCal++
		}
	}
	fmt.Fprintf(w, "1. fitted %d units (%d sparse modes) on %s of normal operation (%d frames of %s), %d calibrated to alerts.budget, in %s\n",
		len(model.Units), nModes, demoDays(normal.Duration), model.Frames, sc.Period, nCal, time.Since(fitStart).Round(time.Millisecond))
	for _, n := range calNotes {
		fmt.Fprintf(w, "   %s\n", n)
	}
	return modelPath, nil
}

// demoDays names a span of whole days in words ("3 days"), any other span
// as a duration.
func demoDays(d time.Duration) string {
	const day = 24 * time.Hour
	switch {
	case d == day:
		return "1 day"
	case d > 0 && d%day == 0:
		return fmt.Sprintf("%d days", d/day)
	}
	return d.String()
}

// demoPublish publishes live to the service at opt.speed until it ends,
// opt.duration passes or ctx is done, drawing the board as it goes. It
// returns what was sent and how many lines the last board drawn has.
func demoPublish(ctx context.Context, env IO, opt demoOptions, live *sim.Scenario, nc *nats.Conn, prefix string, board *board, svc *service.Service) (sim.LiveStats, int, error) {
	w := env.Out
	runCtx, cancel := context.WithCancel(ctx)
	defer cancel()
	if opt.duration > 0 {
		var c2 context.CancelFunc
		runCtx, c2 = context.WithTimeout(runCtx, opt.duration)
		defer c2()
	}
	type liveResult struct {
		st  sim.LiveStats
		err error
	}
	liveDone := make(chan liveResult, 1)
	go func() {
		st, err := live.Live(runCtx, nc, prefix, opt.speed)
		liveDone <- liveResult{st, err}
	}()
	tty := isTerminal(env.Out)
	tick := time.NewTicker(time.Second)
	defer tick.Stop()
	every := 5
	if tty {
		every = 1
	}
	n := 0
	lines := 0
	for {
		select {
		case r := <-liveDone:
			if r.err != nil && !errors.Is(r.err, context.Canceled) && !errors.Is(r.err, context.DeadlineExceeded) {
				return r.st, lines, r.err
			}
			return r.st, lines, nil
		case <-tick.C:
			n++
			if opt.quiet || n%every != 0 {
				continue
			}
			text := board.render(svc.Records())
			if tty && lines > 0 {
				fmt.Fprintf(w, "\x1b[%dA\x1b[J", lines) // redraw in place
			}
			fmt.Fprint(w, text)
			lines = strings.Count(text, "\n")
		}
	}
}

// demoReport scores the service's alerts against the labelled faults that
// started while it ran, prints the figures and keeps them in oc.
func demoReport(w io.Writer, svc *service.Service, sc, live *sim.Scenario, speed float64, oc *demoOutcome) {
	frames, first, last := svc.Pipeline().Frames()
	oc.frames = frames
	fmt.Fprintf(w, "\n4. scored %d frames per unit (%s to %s)\n", frames, first.Format("Jan 2 15:04"), last.Format("Jan 2 15:04"))
	if oc.linesTaken < oc.linesSent {
		fmt.Fprintf(w, "   the service received %d of the %d lines sent: it could not keep up at %gx (try a lower --speed)\n",
			oc.linesTaken, oc.linesSent, speed)
	}
	recs := svc.Records()
	var eps []evaluate.Episode
	for _, e := range live.Truth().Episodes {
		if e.Start.Before(last) {
			eps = append(eps, e)
		}
	}
	oc.span = last.Sub(first) + sc.Period
	ptrs := make([]*alerts.Record, len(recs))
	for i := range recs {
		ptrs[i] = &recs[i]
	}
	m := evaluate.Compute(evaluate.AlertsOf(ptrs), eps, scoreRun(svc.Pipeline().Views(), first, first.Add(oc.span), evaluate.DefaultGrace))
	oc.metrics = m
	fmt.Fprintf(w, "   %d alerts; labelled faults started so far: %d, detected %d, isolated in the top 3: %d; false alerts %d",
		len(recs), m.Episodes, m.Detected, m.IsolatedTop3, m.FalseAlerts)
	if m.FalseAlertsPerDay != nil {
		fmt.Fprintf(w, " (%.2f per simulated day)", *m.FalseAlertsPerDay)
	}
	if m.MedianDelayS != nil {
		fmt.Fprintf(w, "; median delay %s", (time.Duration(*m.MedianDelayS) * time.Second).String())
	}
	fmt.Fprintln(w)
	for i, mt := range m.Matches {
		e := eps[i]
		status := "not detected"
		if mt.Alert != "" {
			status = fmt.Sprintf("alert %s after %s", mt.Alert, (time.Duration(*mt.DelayS) * time.Second).String())
			if mt.Isolated {
				status += ", faulty sensor in the top 3"
			}
		}
		fmt.Fprintf(w, "   %-20s %-9s %-36s %s\n", e.ID, e.Kind, strings.Join(e.Channels, ","), status)
	}
}

// waitIntake waits until in has received want lines, or has received none
// for two seconds, or ctx is done, and returns the lines received. Then it
// gives the frame goroutine a moment to score the last frames.
func waitIntake(ctx context.Context, in *stream.Intake, want uint64) uint64 {
	const poll = 50 * time.Millisecond
	got := in.Stats().Lines
	idle := time.Duration(0)
	for got < want && idle < 2*time.Second && ctx.Err() == nil {
		time.Sleep(poll)
		now := in.Stats().Lines
		if now == got {
			idle += poll
		} else {
			idle = 0
		}
		got = now
	}
	time.Sleep(300 * time.Millisecond)
	return got
}

// freeListen returns addr if it can be listened on, else the same host
// with a free port.
func freeListen(addr string) string {
	ln, err := net.Listen("tcp", addr)
	if err == nil {
		ln.Close()
		return addr
	}
	host, _, _ := net.SplitHostPort(addr)
	if host == "" {
		host = "127.0.0.1"
	}
	return net.JoinHostPort(host, "0")
}

// board keeps the latest score of each unit for the live summary.
type board struct {
	mu    sync.Mutex
	units map[string]*unitLine
	all   map[string]alerts.Record
}

type unitLine struct {
	t                  time.Time
	state              string
	t2, t2l, spe, spel float64
	ready              bool
	missing            int
}

func newBoard() *board { return &board{units: map[string]*unitLine{}, all: map[string]alerts.Record{}} }

// score is the service's OnScore hook (frame goroutine).
func (b *board) score(u *pipeline.Unit, t time.Time) {
	s := u.Score()
	b.mu.Lock()
	l := b.units[u.Name]
	if l == nil {
		l = &unitLine{}
		b.units[u.Name] = l
	}
	l.t, l.state, l.ready, l.missing = t, u.ModelState(), s.Ready, len(s.Missing)
	if st := u.CurrentState(); st != "" {
		l.state += ", state " + st // the unit's operating state
	}
	l.t2, l.t2l, l.spe, l.spel = s.T2, s.T2Limit, s.SPE, s.SPELimit
	b.mu.Unlock()
}

// render draws the compact summary: one line per unit, then the open
// alerts and the latest ended ones with their top sensors (recs by start).
func (b *board) render(recs []alerts.Record) string {
	b.mu.Lock()
	names := make([]string, 0, len(b.units))
	for n := range b.units {
		names = append(names, n)
	}
	sort.Strings(names)
	var sb strings.Builder
	var now time.Time
	for _, n := range names {
		if b.units[n].t.After(now) {
			now = b.units[n].t
		}
	}
	fmt.Fprintf(&sb, "plant time %s   T²/limit   SPE/limit   model\n", now.Format("Jan 2 15:04"))
	for _, n := range names {
		l := b.units[n]
		if !l.ready {
			fmt.Fprintf(&sb, "  %-10s %-31s %s\n", n, "warming up", l.state)
			continue
		}
		fmt.Fprintf(&sb, "  %-10s %6.1f/%-6.1f %s %s %s\n", n, l.t2, l.t2l, bar(l.t2/l.t2l), speCell(l.spe, l.spel), l.state)
	}
	b.mu.Unlock()
	// Open alerts first, then the three most recent that have ended.
	var open, ended []alerts.Record
	for _, r := range recs {
		if r.End == nil {
			open = append(open, r)
		} else {
			ended = append(ended, r)
		}
	}
	if len(ended) > 3 {
		ended = ended[len(ended)-3:]
	}
	if len(open) == 0 {
		sb.WriteString("  no open alerts\n")
	}
	line := func(tag string, r alerts.Record) {
		var top []string
		for i, c := range r.Contributors {
			if i == 3 {
				break
			}
			if i == 0 && c.Expected.Known() {
				top = append(top, fmt.Sprintf("%s (%.0f%%)", c.Expectation(), 100*c.Share))
				continue
			}
			top = append(top, fmt.Sprintf("%s %.0f%%", c.Channel, 100*c.Share))
		}
		if r.Quality != nil {
			top = []string{r.Quality.Describe()}
		}
		fmt.Fprintf(&sb, "  %-6s %-9s %-6s %s  %-5s ×%-5.1f %s\n", tag, r.Unit, r.Severity, r.Start.Format("Jan 2 15:04"),
			r.Peak.Statistic, r.Peak.Ratio, strings.Join(top, ", "))
	}
	for _, r := range open {
		line("ALERT", r)
	}
	for _, r := range ended {
		line("ended", r)
	}
	return sb.String()
}

// speCell is the SPE column of the board (19 characters): value/limit and
// its bar, or, when the limit is not finite (the modes span every channel,
// so nothing is left for SPE to measure), says so in words.
func speCell(spe, limit float64) string {
	if math.IsInf(limit, 0) || math.IsNaN(limit) {
		return fmt.Sprintf("%-19s", "no residual space")
	}
	return fmt.Sprintf("%6.2f/%-6.2f %s", spe, limit, bar(spe/limit))
}

// bar shows a ratio to the limit in 5 cells; "!" past the limit.
func bar(r float64) string {
	if !(r >= 0) {
		return "     "
	}
	if r > 1 {
		return "[!!!]"
	}
	n := int(r * 4)
	return "[" + strings.Repeat("#", n) + strings.Repeat(".", 3-min(n, 3)) + "]"
}
