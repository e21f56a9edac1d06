package cli

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"golang.org/x/term"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/evaluate"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/service"
	"modewatch/configs"
	"modewatch/sim"
)

func init() {
	register(command{name: "demo", args: "[--duration D] [--listen ADDR]", summary: "the invented plant, an embedded message server, the service and its HTTP API, in one command", run: runDemo})
}

const demoHelp = `
Run the shipped demo: an invented utility block of four units and 50
channels (configs/scenario-demo.yaml). The first simulated day (normal
operation) is fitted offline; then the service starts with an embedded NATS
server and its HTTP API, and the simulator publishes the next two days,
with seven labelled faults, in live mode at a speed-up. A compact summary
shows, per unit, T² and SPE against their limits and the open alerts with
their top sensors. At the end the alerts are scored against the labels.

Needs no configuration and no network. Data (model, checkpoints, spool)
goes to a temporary directory unless --data-dir is given. The data is
invented. modewatch is advisory: it never acts on the plant.`

func runDemo(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "demo", "[--duration D] [--listen ADDR] [--speed X]", demoHelp)
	var duration time.Duration
	var listen, dataDir string
	var speed float64
	var quiet bool
	fs.DurationVar(&duration, "duration", 0, "stop after this long (wall clock); default: when the two simulated days have been sent")
	fs.StringVar(&listen, "listen", configs.DefaultListen, "`ADDR` of the HTTP API (another free port is used if it is taken)")
	fs.Float64Var(&speed, "speed", 1440, "simulated seconds per second (1440: a day per minute)")
	fs.StringVar(&dataDir, "data-dir", "", "keep the demo's data in `DIR` instead of a temporary directory")
	fs.BoolVar(&quiet, "quiet", false, "no live summary, only the final report")
	pos, err := parseAll(fs, args)
	if err != nil {
		return err
	}
	if len(pos) > 0 {
		return usagef("unexpected arguments %q", pos)
	}
	if !(speed > 0) {
		return usagef("--speed must be above 0")
	}
	if duration < 0 {
		return usagef("--duration must not be negative")
	}
	if dataDir == "" {
		dir, err := os.MkdirTemp("", "modewatch-demo-")
		if err != nil {
			return err
		}
		defer os.RemoveAll(dir)
		dataDir = dir
	}
	w := env.Out
	fmt.Fprintln(w, "modewatch demo: an invented plant (4 units, 50 channels), simulated; no real equipment is involved.")
	fmt.Fprintln(w, service.Caution)
	fmt.Fprintln(w)

	sc, err := sim.Demo()
	if err != nil {
		return err
	}
	// 1. Learn normal operation from the first, fault-free day.
	day1 := sc.Clone()
	day1.Duration = 24 * time.Hour
	var buf bytes.Buffer
	if err := day1.WriteLineProtocol(&buf); err != nil {
		return err
	}
	cfg := &configs.Config{
		Frames:             configs.Frames{Period: sc.Period},
		Server:             configs.Server{EmbeddedPort: -1},
		HTTP:               configs.HTTP{Listen: freeListen(listen)},
		DataDir:            dataDir,
		CheckpointInterval: time.Minute,
		Log:                configs.Log{Level: "warn"},
	}
	cfg.ApplyDefaults()
	log := newLogger(env.Err, cfg, true)
	fitStart := time.Now()
	res, err := pipeline.Replay(ctx, pipeline.ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: &buf, Fit: true, Log: log})
	if err != nil {
		return fmt.Errorf("fitting the first day: %w", err)
	}
	model, err := res.Pipeline.Baseline()
	if err != nil {
		return fmt.Errorf("fitting the first day: %w", err)
	}
	modelPath := filepath.Join(dataDir, "demo-model.json")
	if err := pipeline.WriteModel(modelPath, model); err != nil {
		return err
	}
	nModes := 0
	for _, u := range model.Units {
		nModes += len(u.Modes)
	}
	fmt.Fprintf(w, "1. fitted %d units (%d sparse modes) on the first simulated day (%d frames of %s) in %s\n",
		len(model.Units), nModes, model.Frames, sc.Period, time.Since(fitStart).Round(time.Millisecond))

	// 2. The service, from that model.
	cfg.Model.File = modelPath
	board := newBoard()
	svc, err := service.Start(ctx, service.Options{Config: cfg, Log: log, Stdout: io.Discard, OnScore: board.score})
	if err != nil {
		return err
	}
	defer func() {
		sctx, cancel := context.WithTimeout(context.Background(), cfg.ShutdownTimeout)
		defer cancel()
		_ = svc.Shutdown(sctx)
	}()
	info := svc.Info()
	fmt.Fprintf(w, "2. service running with an embedded NATS server at %s\n", info.NATS)
	fmt.Fprintf(w, "   HTTP API:  %s/api/units   %s/api/alerts   %s/metrics   %s/healthz\n", info.HTTP, info.HTTP, info.HTTP, info.HTTP)
	fmt.Fprintf(w, "   subjects:  readings modewatch.readings.<unit>, alerts %s, scores %s\n", info.Alerts, info.Scores)
	fmt.Fprintf(w, "   data:      %s\n", dataDir)

	// 3. The next two days, live.
	live := sc.Clone()
	live.Start = sc.Start.Add(24 * time.Hour)
	live.Duration = sc.Duration - 24*time.Hour
	nc, err := nats.Connect(info.NATS, nats.Name("modewatch-demo-plant"))
	if err != nil {
		return err
	}
	defer nc.Close()
	fmt.Fprintf(w, "3. publishing %s of simulated plant (%s to %s, 7 labelled faults) at %gx", live.Duration,
		live.Start.Format("Jan 2 15:04"), live.End().Format("Jan 2 15:04"), speed)
	if duration > 0 {
		fmt.Fprintf(w, " for %s", duration)
	}
	fmt.Fprintf(w, "; Ctrl-C stops\n\n")

	runCtx, cancel := context.WithCancel(ctx)
	defer cancel()
	if duration > 0 {
		var c2 context.CancelFunc
		runCtx, c2 = context.WithTimeout(runCtx, duration)
		defer c2()
	}
	liveErr := make(chan error, 1)
	go func() {
		_, err := live.Live(runCtx, nc, "modewatch", speed)
		liveErr <- err
	}()
	tty := false
	if f, ok := env.Out.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
		tty = true
	}
	tick := time.NewTicker(time.Second)
	defer tick.Stop()
	every := 5
	if tty {
		every = 1
	}
	n := 0
	lines := 0
loop:
	for {
		select {
		case err := <-liveErr:
			if err != nil && !errors.Is(err, context.Canceled) && !errors.Is(err, context.DeadlineExceeded) {
				return err
			}
			break loop
		case <-tick.C:
			n++
			if quiet || n%every != 0 {
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
	// Let the service score what it has received.
	time.Sleep(300 * time.Millisecond)
	if !quiet {
		if tty && lines > 0 {
			fmt.Fprintf(w, "\x1b[%dA\x1b[J", lines)
		}
		fmt.Fprint(w, board.render(svc.Records()))
	}

	// 4. Report against the labels.
	frames, first, last := svc.Pipeline().Frames()
	fmt.Fprintf(w, "\n4. scored %d frames per unit (%s to %s)\n", frames, first.Format("Jan 2 15:04"), last.Format("Jan 2 15:04"))
	recs := svc.Records()
	var eps []evaluate.Episode
	for _, e := range live.Truth().Episodes {
		if e.Start.Before(last) {
			eps = append(eps, evaluate.Episode{ID: e.ID, Start: e.Start, End: e.End, Kind: e.Kind, Channels: e.Channels})
		}
	}
	var al []evaluate.Alert
	for _, r := range recs {
		a := evaluate.Alert{ID: r.ID, Start: r.Start}
		for _, c := range r.Contributors {
			a.Top = append(a.Top, c.Channel)
		}
		if len(a.Top) == 0 && r.Quality != nil {
			a.Top = []string{r.Quality.Channel}
		}
		al = append(al, a)
	}
	span := last.Sub(first) + sc.Period
	m := evaluate.Compute(al, eps, span, evaluate.DefaultGrace)
	fmt.Fprintf(w, "   %d alerts; labelled faults started so far: %d, detected %d, isolated in the top 3: %d; false alerts %d",
		len(recs), m.Episodes, m.Detected, m.IsolatedTop3, m.FalseAlerts)
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
	fmt.Fprintln(w, "\nThe same plant offline: modewatch sim --out demo; modewatch sim --duration 24h --out demo-day1;")
	fmt.Fprintln(w, "  modewatch fit --out demo/model.json demo-day1/readings.lp;")
	fmt.Fprintln(w, "  modewatch replay --model demo/model.json --truth demo/truth.json demo/readings.lp")
	fmt.Fprintln(w, service.Caution)
	return nil
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
	t                   time.Time
	state               string
	t2, t2l, spe, spel  float64
	ready               bool
	missing, outOfLimit int
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
		fmt.Fprintf(&sb, "  %-10s %6.1f/%-6.1f %s %6.2f/%-6.2f %s %s\n", n, l.t2, l.t2l, bar(l.t2/l.t2l), l.spe, l.spel, bar(l.spe/l.spel), l.state)
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
			top = append(top, fmt.Sprintf("%s %.0f%%", c.Channel, 100*c.Share))
		}
		if r.Quality != nil {
			top = []string{r.Quality.Kind + " " + r.Quality.Channel}
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
