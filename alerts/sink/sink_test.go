package sink

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"sync"
	"testing"
	"time"
)

// testDest is an in-process destination for the queue and spool tests: it
// records what it receives and fails on demand. (The NATS and webhook
// tests use a real embedded server and a real HTTP server.)
type testDest struct {
	mu     sync.Mutex
	got    []string
	fail   func(m Message) error // nil: accept
	gate   chan struct{}         // non-nil: every Deliver waits for it to close
	closed bool
	change chan struct{}
}

func newDest() *testDest { return &testDest{change: make(chan struct{}, 1)} }

func (d *testDest) Deliver(ctx context.Context, m Message) error {
	d.mu.Lock()
	gate, fail := d.gate, d.fail
	d.mu.Unlock()
	if gate != nil {
		select {
		case <-gate:
		case <-ctx.Done():
			return ctx.Err()
		}
	}
	if fail != nil {
		if err := fail(m); err != nil {
			return err
		}
	}
	d.mu.Lock()
	d.got = append(d.got, m.ID)
	d.mu.Unlock()
	select {
	case d.change <- struct{}{}:
	default:
	}
	return nil
}

func (d *testDest) Close() error { d.mu.Lock(); d.closed = true; d.mu.Unlock(); return nil }

func (d *testDest) ids() []string {
	d.mu.Lock()
	defer d.mu.Unlock()
	return slices.Clone(d.got)
}

// waitFor polls cond until it holds or the deadline passes (a hang
// bound: a minute).
func waitFor(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(time.Minute)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s", what)
		}
		time.Sleep(2 * time.Millisecond)
	}
}

func msg(i int) Message {
	return Message{ID: fmt.Sprintf("u/model/%04d#1", i), Unit: "u", Data: fmt.Appendf(nil, `{"n":%d}`, i)}
}

func ids(from, to int) []string {
	var out []string
	for i := from; i < to; i++ {
		out = append(out, msg(i).ID)
	}
	return out
}

var fast = Backoff{Initial: time.Millisecond, Max: 5 * time.Millisecond}

func closeNow(t *testing.T, s *Sink) error {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	return s.Close(ctx)
}

// TestOverflowKeepsOrder: with the destination stalled, Submit never
// blocks; what does not fit the queue goes to the spool, and everything is
// delivered in submission order once the destination is back.
func TestOverflowKeepsOrder(t *testing.T) {
	d := newDest()
	d.gate = make(chan struct{})
	s, err := New(d, Options{Name: "t", QueueLen: 4, SpoolDir: t.TempDir(), Backoff: fast})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 200; i++ {
		if err := s.Submit(msg(i)); err != nil {
			t.Fatal(err)
		}
	}
	st := s.Stats()
	if st.SpoolOnly == 0 || st.Submitted != 200 || st.Dropped != 0 {
		t.Fatalf("stats while stalled: %+v", st)
	}
	close(d.gate)
	waitFor(t, "200 deliveries", func() bool { return len(d.ids()) == 200 })
	if got := d.ids(); !slices.Equal(got, ids(0, 200)) {
		t.Fatalf("order: %v", got)
	}
	// Interleave more after the spool has been read back.
	for i := 200; i < 260; i++ {
		s.Submit(msg(i))
	}
	waitFor(t, "260 deliveries", func() bool { return len(d.ids()) == 260 })
	if got := d.ids(); !slices.Equal(got, ids(0, 260)) {
		t.Fatalf("order after refill: %v", got[200:])
	}
	if err := closeNow(t, s); err != nil {
		t.Fatal(err)
	}
	if st := s.Stats(); st.Pending != 0 || st.Delivered != 260 || st.Replayed == 0 {
		t.Errorf("final stats %+v", st)
	}
}

// TestRestartDeliversRest: a destination that accepts 5 messages and then
// fails; Close at a deadline leaves the rest in the spool (no error: the
// 15 records wait there, counted); a new sink on
// the same spool delivers exactly the rest, in order.
func TestRestartDeliversRest(t *testing.T) {
	dir := t.TempDir()
	d1 := newDest()
	n := 0
	d1.fail = func(Message) error {
		n++
		if n > 5 {
			return errors.New("down")
		}
		return nil
	}
	s1, err := New(d1, Options{Name: "r", QueueLen: 8, SpoolDir: dir, Backoff: fast})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 20; i++ {
		s1.Submit(msg(i))
	}
	waitFor(t, "retries", func() bool { return s1.Stats().Retries > 3 })
	ctx, cancel := context.WithTimeout(context.Background(), 50*time.Millisecond)
	err = s1.Close(ctx)
	cancel()
	if err != nil {
		t.Errorf("close with a dead destination and the rest spooled: %v, want nil (nothing is lost)", err)
	}
	if w := s1.Waiting(); w != 15 {
		t.Errorf("%d records waiting in the spool, want 15", w)
	}
	if err2 := s1.Close(context.Background()); err2 != err {
		t.Errorf("second Close: %v, want the first result %v", err2, err)
	}
	if err := s1.Submit(msg(99)); !errors.Is(err, ErrClosed) {
		t.Errorf("submit after close: %v", err)
	}
	if got := d1.ids(); !slices.Equal(got, ids(0, 5)) {
		t.Fatalf("first run delivered %v", got)
	}
	if st := s1.Stats(); st.Pending == 0 || !d1.closed {
		t.Fatalf("nothing pending after the failed run: %+v", st)
	}

	d2 := newDest()
	s2, err := New(d2, Options{Name: "r", QueueLen: 8, SpoolDir: dir, Backoff: fast})
	if err != nil {
		t.Fatal(err)
	}
	s2.Submit(msg(20))
	waitFor(t, "the rest", func() bool { return len(d2.ids()) == 16 })
	if got := d2.ids(); !slices.Equal(got, ids(5, 21)) {
		t.Fatalf("after restart: %v", got)
	}
	if err := closeNow(t, s2); err != nil {
		t.Fatal(err)
	}
	if fi, err := os.Stat(filepath.Join(dir, "r.spool")); err != nil || fi.Size() != 0 {
		t.Errorf("spool not compacted after full delivery: %v %v", fi.Size(), err)
	}
}

// TestTornTail: a crash in the middle of an append leaves a partial line;
// it is cut off at open and counted, the whole entries before it replay.
func TestTornTail(t *testing.T) {
	dir := t.TempDir()
	d := newDest()
	d.gate = make(chan struct{}) // never delivers in the first run
	s, _ := New(d, Options{Name: "c", SpoolDir: dir, Backoff: fast})
	for i := 0; i < 3; i++ {
		s.Submit(msg(i))
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Millisecond)
	s.Close(ctx)
	cancel()
	f, _ := os.OpenFile(filepath.Join(dir, "c.spool"), os.O_WRONLY|os.O_APPEND, 0)
	f.WriteString(`1234abcd {"id":"u/model/torn#1","unit":"u","da`)
	f.Close()

	d2 := newDest()
	s2, err := New(d2, Options{Name: "c", SpoolDir: dir, Backoff: fast})
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, "replay", func() bool { return len(d2.ids()) == 3 })
	if st := s2.Stats(); st.Corrupt == 0 {
		t.Errorf("torn tail not counted: %+v", st)
	}
	if got := d2.ids(); !slices.Equal(got, ids(0, 3)) {
		t.Errorf("replayed %v", got)
	}
	closeNow(t, s2)
}

// TestPermanentRejected: a permanent refusal moves the message to the
// reject file and delivery goes on with the next.
func TestPermanentRejected(t *testing.T) {
	dir := t.TempDir()
	d := newDest()
	d.fail = func(m Message) error {
		if m.ID == msg(1).ID {
			return Permanent(errors.New("422 unprocessable"))
		}
		return nil
	}
	s, _ := New(d, Options{Name: "p", SpoolDir: dir, Backoff: fast})
	for i := 0; i < 3; i++ {
		s.Submit(msg(i))
	}
	waitFor(t, "2 deliveries", func() bool { return len(d.ids()) == 2 })
	closeNow(t, s)
	if got := d.ids(); !slices.Equal(got, []string{msg(0).ID, msg(2).ID}) {
		t.Errorf("delivered %v", got)
	}
	rej, _ := os.ReadFile(filepath.Join(dir, "p.rejected"))
	if !bytes.Contains(rej, []byte(msg(1).ID)) || !bytes.Contains(rej, []byte("422")) || s.Stats().Rejected != 1 {
		t.Errorf("reject file %q stats %+v", rej, s.Stats())
	}
}

// TestNoSpool: without a spool, overflow is an error and a counter.
func TestNoSpool(t *testing.T) {
	d := newDest()
	d.gate = make(chan struct{})
	s, _ := New(d, Options{Name: "m", QueueLen: 2, Backoff: fast})
	var overflow int
	for i := 0; i < 10; i++ {
		if err := s.Submit(msg(i)); errors.Is(err, ErrOverflow) {
			overflow++
		}
	}
	// One message may already be in Deliver, the queue holds 2.
	if overflow < 7 || s.Stats().Dropped != uint64(overflow) {
		t.Errorf("overflow %d, stats %+v", overflow, s.Stats())
	}
	close(d.gate)
	closeNow(t, s)
	if len(d.ids()) != 10-overflow {
		t.Errorf("delivered %d, want %d", len(d.ids()), 10-overflow)
	}
}

// TestNoGoroutineLeak: Close stops every goroutine of the sink.
func TestNoGoroutineLeak(t *testing.T) {
	before := runtime.NumGoroutine()
	for i := 0; i < 5; i++ {
		d := newDest()
		d.fail = func(Message) error { return errors.New("down") }
		s, _ := New(d, Options{Name: "g", SpoolDir: t.TempDir(), Backoff: fast})
		s.Submit(msg(i))
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Millisecond)
		s.Close(ctx)
		cancel()
	}
	waitFor(t, "goroutines to exit", func() bool { return runtime.NumGoroutine() <= before })
}

func TestBackoffSchedule(t *testing.T) {
	s := &Sink{o: Options{Backoff: Backoff{Initial: 100 * time.Millisecond, Max: time.Second, Jitter: 0.5}}}
	s.rng = newRand(1)
	for attempt, ceil := range []time.Duration{100, 200, 400, 800, 1000, 1000} {
		ceil *= time.Millisecond
		for k := 0; k < 50; k++ {
			if d := s.backoff(attempt); d > ceil || d < ceil/2 {
				t.Fatalf("attempt %d: %v outside [%v, %v]", attempt, d, ceil/2, ceil)
			}
		}
	}
}

// benchSubmit measures Submit with the destination stalled: queue only
// (no spool) against the write-ahead spool.
func benchSubmit(b *testing.B, spool bool) {
	d := newDest()
	d.gate = make(chan struct{})
	o := Options{Name: "b", QueueLen: 1 << 20, Backoff: fast}
	if spool {
		o.SpoolDir = b.TempDir()
		o.Fsync = FsyncNever
		o.MaxSpoolBytes = 1 << 40
	}
	s, _ := New(d, o)
	m := msg(1)
	m.Data = make([]byte, 0, 900)
	m.Data = fmt.Appendf(m.Data, `{"pad":"%0800d"}`, 0)
	b.ReportAllocs()
	for b.Loop() {
		s.Submit(m)
	}
	b.StopTimer()
	close(d.gate)
	ctx, cancel := context.WithTimeout(context.Background(), time.Millisecond)
	s.Close(ctx)
	cancel()
}

func BenchmarkSubmit(b *testing.B) {
	b.Run("queue", func(b *testing.B) { benchSubmit(b, false) })
	b.Run("spool", func(b *testing.B) { benchSubmit(b, true) })
}

// TestSpoolLimitAndFsyncAlways: a full spool refuses with ErrSpoolFull and
// a counter; with FsyncAlways delivery still works.
func TestSpoolLimitAndFsyncAlways(t *testing.T) {
	d := newDest()
	d.gate = make(chan struct{})
	s, _ := New(d, Options{Name: "l", SpoolDir: t.TempDir(), MaxSpoolBytes: 300, Fsync: FsyncAlways, Backoff: fast})
	var full int
	for i := 0; i < 10; i++ {
		if err := s.Submit(msg(i)); errors.Is(err, ErrSpoolFull) {
			full++
		} else if err != nil {
			t.Fatal(err)
		}
	}
	line, _ := encode(msg(0)) // all entries have the same length
	fit := 300 / len(line)
	if full != 10-fit || s.Stats().Dropped != uint64(10-fit) {
		t.Errorf("%d refused, want %d; stats %+v", full, 10-fit, s.Stats())
	}
	if err := s.Submit(Message{ID: "x", Data: []byte("{")}); err == nil {
		t.Error("invalid JSON accepted")
	}
	close(d.gate)
	waitFor(t, "delivery", func() bool { return len(d.ids()) == fit })
	if err := s.Submit(msg(10)); err != nil {
		t.Errorf("after delivery the spool has room again: %v", err)
	}
	waitFor(t, "delivery", func() bool { return len(d.ids()) == fit+1 })
	closeNow(t, s)
	if got := d.ids(); !slices.Equal(got, append(ids(0, fit), msg(10).ID)) {
		t.Errorf("delivered %v", got)
	}
}
