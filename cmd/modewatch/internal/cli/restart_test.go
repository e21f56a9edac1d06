package cli

import (
	"bufio"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/sim"
	"modewatch/stream/natsource/natstest"
)

// TestMain lets the test binary stand in for the modewatch binary: with
// MODEWATCH_CHILD=1 it runs the command line in MODEWATCH_ARGS, so the
// restart test can kill a real child process without a separate build.
func TestMain(m *testing.M) {
	if os.Getenv("MODEWATCH_CHILD") == "1" {
		var args []string
		if err := json.Unmarshal([]byte(os.Getenv("MODEWATCH_ARGS")), &args); err != nil {
			fmt.Fprintln(os.Stderr, err)
			os.Exit(2)
		}
		os.Exit(childMain(args))
	}
	os.Exit(m.Run())
}

// childMain is main() of cmd/modewatch.
func childMain(args []string) int {
	ctx, stop := signalContext()
	defer stop()
	return Main(ctx, args, IO{In: os.Stdin, Out: os.Stdout, Err: os.Stderr, Signals: stop})
}

// scoreLog keeps the score lines seen on the scores subject by unit and
// frame time.
type scoreLog struct {
	mu    sync.Mutex
	seen  map[string][]string // "unit time" -> every line published for it
	total int
}

func (s *scoreLog) add(m *nats.Msg) {
	f := strings.Fields(string(m.Data))
	if len(f) < 3 {
		return
	}
	s.mu.Lock()
	k := f[0] + " " + f[len(f)-1]
	s.seen[k] = append(s.seen[k], string(m.Data))
	s.total++
	s.mu.Unlock()
}

// reset forgets every line and returns what it had.
func (s *scoreLog) reset() map[string][]string {
	s.mu.Lock()
	defer s.mu.Unlock()
	old := s.seen
	s.seen, s.total = map[string][]string{}, 0
	return old
}

// differ counts the unit frames of other with a line that is not the
// line seen here for the same unit frame (or with none seen here), and
// returns the earliest such pair.
func (s *scoreLog) differ(other map[string][]string) (n int, got, want string) {
	s.mu.Lock()
	defer s.mu.Unlock()
	var first string
	for k, ls := range other {
		var ref string
		if r := s.seen[k]; len(r) > 0 {
			ref = r[0]
		}
		for _, l := range ls {
			if l != ref {
				if n == 0 || frameTime(k) < frameTime(first) {
					first, got, want = k, l, ref
				}
				n++
				break
			}
		}
	}
	return n, got, want
}

// frameTime is the timestamp of a "unit time" key.
func frameTime(k string) int64 {
	f := strings.Fields(k)
	v, _ := strconv.ParseInt(f[len(f)-1], 10, 64)
	return v
}

// latest returns the latest frame time scored.
func (s *scoreLog) latest() time.Time {
	s.mu.Lock()
	defer s.mu.Unlock()
	var ns int64
	for k := range s.seen {
		f := strings.Fields(k)
		if v, err := strconv.ParseInt(f[len(f)-1], 10, 64); err == nil && v > ns {
			ns = v
		}
	}
	return time.Unix(0, ns).UTC()
}

func (s *scoreLog) distinct() int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return len(s.seen)
}

// TestKillRestart: the service consumes a JetStream stream; one run goes
// through uninterrupted, the other is killed hard (SIGKILL) twice, once
// right after a checkpoint while idle and once mid-stream, and restarted
// each time from its checkpoint and durable consumer. Both end with the
// same alert incidents, every frame of every unit is scored with exactly
// the score line of the uninterrupted run (frames scored again after a
// restart included; a restart that does not seed the aligner with the
// checkpoint's carried readings scores the first frames after the first
// kill without them, and the models drift apart from there), and the
// restored models count each frame once. The reference is the
// uninterrupted run of the same binary.
func TestKillRestart(t *testing.T) {
	if testing.Short() {
		t.Skip("starts child processes")
	}
	dir := t.TempDir()
	srv := natstest.StartJetStream(t)
	nc := natstest.Connect(t, srv)
	js, _ := nc.JetStream()
	if _, err := js.AddStream(&nats.StreamConfig{Name: "READINGS", Subjects: []string{"modewatch.readings.>"}, Storage: nats.FileStorage}); err != nil {
		t.Fatal(err)
	}

	// A baseline from the first simulated day, then the first 12 hours of
	// the test days after the split (with the first labelled fault) stored in the stream in two halves,
	// with the scenario's timestamp jitter and one dropout in ten lines: a
	// frame right after a restart then carries, for some channel, a reading
	// whose message was acknowledged with the checkpoint and is not
	// delivered again, so only the checkpoint's carried readings (seeded
	// into the aligner at the restart) give it the value the uninterrupted
	// run used.
	sc, _ := sim.Demo()
	sc.Dropout = 0.1
	modelPath := fitDemoDay1(t, dir)
	first := sc.Tested()
	first.Duration = 6 * time.Hour
	second := first.Clone()
	second.Start = first.Start.Add(first.Duration)
	publish := func(part *sim.Scenario, total int) {
		if _, err := part.Live(context.Background(), nc, "modewatch", 1e9); err != nil {
			t.Fatal(err)
		}
		for deadline := time.Now().Add(20 * time.Second); ; time.Sleep(20 * time.Millisecond) {
			info, err := js.StreamInfo("READINGS")
			if err == nil && info.State.Msgs == uint64(total) {
				break
			}
			if time.Now().After(deadline) {
				t.Fatalf("stream holds %v messages, want %d: %v", info.State.Msgs, total, err)
			}
		}
	}
	publish(first, first.Samples()*4)
	// Frames per unit the aligner emits: all but the last, still pending.
	want := first.Samples() + second.Samples() - 1

	scores := &scoreLog{seen: map[string][]string{}}
	sub, _ := nc.Subscribe("modewatch.scores.>", scores.add)
	defer sub.Unsubscribe()

	run := func(name string) (string, func() *exec.Cmd) {
		data := filepath.Join(dir, name)
		os.MkdirAll(data, 0o755)
		cfg := filepath.Join(data, "config.yaml")
		// A 1-of-1 on-delay, so that the runs raise incidents to compare.
		os.WriteFile(cfg, []byte(jetStreamRunConfig([]string{srv.ClientURL()}, name, modelPath, data)+"alerts: {on_delay: {n: 1, m: 1}}\n"), 0o644)
		start := func() *exec.Cmd { return startModewatch(t, name, "run", "--config", cfg) }
		return data, start
	}
	waitScores := func(n int, what string) {
		deadline := time.Now().Add(60 * time.Second)
		for scores.distinct() < n {
			if time.Now().After(deadline) {
				t.Fatalf("%s: %d distinct score lines, want %d", what, scores.distinct(), n)
			}
			time.Sleep(20 * time.Millisecond)
		}
	}
	stop := func(cmd *exec.Cmd, what string) {
		cmd.Process.Signal(syscall.SIGTERM)
		if err := cmd.Wait(); err != nil {
			t.Fatalf("%s: %v", what, err)
		}
	}

	// Run b, killed twice. First when it has scored every frame of the
	// first half and its checkpoint holds the last of them (so every
	// message of those frames is acknowledged); then the second half is
	// published, and run b restarted and killed again mid-stream.
	dataB, startB := run("b")
	b := startB()
	waitScores(4*(first.Samples()-1), "run b before the first kill")
	lastFrame := scores.latest()
	// A checkpoint acknowledges what was held when it began, so the one
	// that first holds the last frame may leave the last messages
	// unacknowledged: wait for the one after it.
	var firstHeld time.Time
	for deadline := time.Now().Add(30 * time.Second); ; time.Sleep(20 * time.Millisecond) {
		cks, _ := pipeline.ReadCheckpoints(filepath.Join(dataB, "checkpoints"))
		n := 0
		var created time.Time
		for _, ck := range cks {
			if ck.To.Equal(lastFrame) {
				n++
				created = ck.Created
			}
		}
		if n == 4 && firstHeld.IsZero() {
			firstHeld = created
		}
		if n == 4 && created.After(firstHeld) {
			break
		}
		if time.Now().After(deadline) {
			for _, ck := range cks {
				t.Logf("%s: to %v", ck.Units[0].Name, ck.To)
			}
			t.Fatalf("run b: %d of 4 checkpoints hold the frame at %v", n, lastFrame)
		}
	}
	b.Process.Signal(syscall.SIGKILL)
	b.Wait()
	publish(second, (first.Samples()+second.Samples())*4)
	b = startB()
	waitScores(4*(first.Samples()+second.Samples()/2), "run b before the second kill")
	b.Process.Signal(syscall.SIGKILL)
	b.Wait()
	t.Logf("killed after %d distinct frames scored", scores.distinct())
	// The frames after the checkpoint of this mid-stream kill.
	cks, _ := pipeline.ReadCheckpoints(filepath.Join(dataB, "checkpoints"))
	var midCut int64
	for _, ck := range cks {
		if ns := ck.To.UnixNano(); midCut == 0 || ns < midCut {
			midCut = ns
		}
	}
	b = startB()
	waitScores(4*want, "run b after the restart")
	stop(b, "run b")
	countB, totalB := scores.distinct(), scores.total
	linesB := scores.reset()

	// Run a, uninterrupted: the reference.
	dataA, startA := run("a")
	a := startA()
	waitScores(4*want, "run a")
	stop(a, "run a")
	if got := scores.distinct(); got != countB {
		t.Errorf("run b scored %d distinct unit frames, run a %d", countB, got)
	}
	// Up to the checkpoint of the mid-stream kill and after it alike: the
	// first frames after it may need a carried reading of a channel the
	// restarted process has not discovered again yet (its next readings
	// dropped), which the restored unit carries itself.
	before := map[string][]string{}
	after := map[string][]string{}
	for k, ls := range linesB {
		if frameTime(k) <= midCut {
			before[k] = ls
		} else {
			after[k] = ls
		}
	}
	if n, got, want := scores.differ(before); n > 0 {
		t.Errorf("run b: %d unit frames up to the mid-stream checkpoint scored differently from run a; first:\n got %s\nwant %s", n, got, want)
	}
	if n, got, want := scores.differ(after); n > 0 {
		t.Errorf("run b: %d unit frames after the mid-stream checkpoint (%v) scored differently from run a; first:\n got %s\nwant %s",
			n, time.Unix(0, midCut).UTC(), got, want)
	}

	// The restored models counted each frame once.
	cka, _ := pipeline.ReadCheckpoints(filepath.Join(dataA, "checkpoints"))
	ckb, _ := pipeline.ReadCheckpoints(filepath.Join(dataB, "checkpoints"))
	if len(cka) != 4 || len(ckb) != 4 {
		t.Fatalf("checkpoints: %d and %d", len(cka), len(ckb))
	}
	for i := range cka {
		if cka[i].Frames != ckb[i].Frames || !cka[i].To.Equal(ckb[i].To) {
			t.Errorf("unit %s: run a %d frames to %v, run b %d to %v", cka[i].Units[0].Name, cka[i].Frames, cka[i].To, ckb[i].Frames, ckb[i].To)
		}
	}

	// The same incidents, ending the same way.
	ra, rb := lastRevisions(t, filepath.Join(dataA, "alerts.jsonl")), lastRevisions(t, filepath.Join(dataB, "alerts.jsonl"))
	t.Logf("%d incidents in both runs; %d score lines published for %d unit frames in the killed run (frames after the last checkpoint are scored again by the restored models)",
		len(ra), totalB, countB)
	if len(ra) == 0 {
		t.Error("no alerts in the uninterrupted run: the comparison would prove nothing")
	}
	if len(ra) != len(rb) {
		t.Errorf("run a %d incidents, run b %d", len(ra), len(rb))
	}
	for id, x := range ra {
		y, ok := rb[id]
		if !ok {
			t.Errorf("incident %s missing after the restart", id)
			continue
		}
		if x.Revision != y.Revision || x.Peak != y.Peak || (x.End == nil) != (y.End == nil) {
			t.Errorf("incident %s: run a rev %d peak %+v, run b rev %d peak %+v", id, x.Revision, x.Peak, y.Revision, y.Peak)
		}
	}
}

// jetStreamRunConfig is the configuration of a run that reads the READINGS
// stream through the durable consumer durable, starts from the fitted
// model, writes alerts to data/alerts.jsonl and checkpoints every second.
func jetStreamRunConfig(urls []string, durable, model, data string) string {
	q := make([]string, len(urls))
	for i, u := range urls {
		q[i] = fmt.Sprintf("%q", u)
	}
	return fmt.Sprintf(`server: {urls: [%s]}
intake:
  jetstream: {stream: READINGS, durable: %s}
frames: {period: 20s}
model: {file: %q}
delivery: {file: %q}
http: {listen: "off"}
state_dir: %q
checkpoint_interval: 1s
log: {level: warn}
`, strings.Join(q, ", "), durable, model, filepath.Join(data, "alerts.jsonl"), data)
}

// startModewatch starts the test binary as modewatch with args (see
// TestMain), its standard error in the test log prefixed by name.
func startModewatch(t *testing.T, name string, args ...string) *exec.Cmd {
	t.Helper()
	a, _ := json.Marshal(args)
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), "MODEWATCH_CHILD=1", "MODEWATCH_ARGS="+string(a))
	cmd.Stderr = &prefixWriter{t: t, prefix: name + ": "}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	return cmd
}

// fitDemoDay1 fits a model with the fit command on the fault-free first day
// of the demo plant (invented data) and returns the model file's path.
func fitDemoDay1(t *testing.T, dir string) string {
	t.Helper()
	modelPath := filepath.Join(dir, "model.json")
	day1 := filepath.Join(dir, "day1.lp")
	if err := os.WriteFile(day1, testkit.DemoLog(t, 24*time.Hour), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, _, errs := runCLI(t, "", "fit", "--quiet", "--out", modelPath, day1); code != ExitOK {
		t.Fatalf("fit: %s", errs)
	}
	return modelPath
}

// lastRevisions reads a JSON-lines alert file and keeps the latest
// revision of each record.
func lastRevisions(t *testing.T, path string) map[string]alerts.Record {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	out := map[string]alerts.Record{}
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 1<<20), 1<<20)
	for sc.Scan() {
		var r alerts.Record
		if err := json.Unmarshal(sc.Bytes(), &r); err != nil {
			t.Fatalf("%s: %v", path, err)
		}
		if old, ok := out[r.ID]; !ok || r.Revision >= old.Revision {
			out[r.ID] = r
		}
	}
	return out
}

// prefixWriter logs a child's standard error through the test log.
type prefixWriter struct {
	t      *testing.T
	prefix string
	mu     sync.Mutex
	buf    []byte
}

func (w *prefixWriter) Write(p []byte) (int, error) {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.buf = append(w.buf, p...)
	for {
		i := strings.IndexByte(string(w.buf), '\n')
		if i < 0 {
			break
		}
		w.t.Log(w.prefix + string(w.buf[:i]))
		w.buf = w.buf[i+1:]
	}
	return len(p), nil
}
