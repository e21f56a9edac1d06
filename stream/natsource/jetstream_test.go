package natsource

import (
	"errors"
	"fmt"
	"math/rand/v2"
	"strconv"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"modewatch/stream/natsource/natstest"
)

// publishN publishes n messages "i" (i = 1..n) to subj through JetStream,
// waiting for each acknowledgement from the server, and returns the
// stream sequence of each.
func publishN(t *testing.T, nc *nats.Conn, subj string, from, to int) {
	t.Helper()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	ctx := ctxT(t, 30*time.Second)
	for i := from; i <= to; i++ {
		if _, err := js.Publish(ctx, subj, []byte(strconv.Itoa(i))); err != nil {
			t.Fatalf("publish %d: %v", i, err)
		}
	}
}

// eventTimes gives message i a "latest event time" that grows with i but
// not monotonically (seeded jitter of up to 5 s), so that acknowledgements
// by watermark happen out of sequence order.
func eventTimes(n int) []time.Time {
	r := rand.New(rand.NewPCG(1, 2))
	ts := make([]time.Time, n+1)
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	for i := 1; i <= n; i++ {
		ts[i] = t0.Add(time.Duration(i)*time.Second + time.Duration(r.IntN(5000))*time.Millisecond)
	}
	return ts
}

// jetStreamEvents checks the test for leaked goroutines (checkNoLeak),
// starts a JetStream server and returns its client URL and the event times
// of n messages (eventTimes).
func jetStreamEvents(t *testing.T, n int) (url string, ts []time.Time) {
	t.Helper()
	checkNoLeak(t)
	return natstest.StartJetStream(t).ClientURL(), eventTimes(n)
}

// consumerRun is one life of a consuming process: a connection and a
// JetStream consumer, acknowledging each message once a simulated aligner's
// watermark (the newest event time fed, minus wmLag) passes the message's
// event time, as stream.Intake.FeedAck does. It records what it processed.
type consumerRun struct {
	conn *Conn
	cons *JSConsumer

	mu         sync.Mutex
	processed  map[uint64]int // stream seq → times fed
	payload    map[uint64]int
	waiting    []waitingAck  // fed, not yet acknowledged
	wmLag      time.Duration // the simulated aligner runs this far behind the newest event time
	newest     time.Time
	ackAll     bool
	count      chan int
	loseAck    func(seq uint64, delivery int) bool // fault injection: drop this acknowledgement
	deliveries map[uint64]int
	limit      int                                 // if > 0, the process "dies" after feeding this many: later messages are ignored
	loseMsg    func(seq uint64, delivery int) bool // fault injection: this delivery never arrives
}

type waitingAck struct {
	t   time.Time
	ack func() error
}

// ackThrough acknowledges every waiting message whose event time is before
// wm and returns how many. Called with r.mu held.
func (r *consumerRun) ackThrough(wm time.Time) (int, error) {
	kept := r.waiting[:0]
	n := 0
	var errs []error
	for _, w := range r.waiting {
		if w.t.Before(wm) {
			errs = append(errs, w.ack())
			n++
		} else {
			kept = append(kept, w)
		}
	}
	r.waiting = kept
	return n, errors.Join(errs...)
}

func startRun(t *testing.T, url string, cfg JetStreamConfig, ts []time.Time, lag time.Duration) *consumerRun {
	t.Helper()
	c, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{url}, ReconnectWait: 20 * time.Millisecond}, nil)
	if err != nil {
		t.Fatal(err)
	}
	r := &consumerRun{
		conn:       c,
		processed:  map[uint64]int{},
		payload:    map[uint64]int{},
		deliveries: map[uint64]int{},
		wmLag:      lag,
		count:      make(chan int, 1<<16),
	}
	r.cons, err = c.ConsumeJetStream(ctxT(t, 10*time.Second), cfg, func(m Msg) error {
		r.mu.Lock()
		defer r.mu.Unlock()
		r.deliveries[m.Seq]++
		if r.limit > 0 && len(r.processed) >= r.limit {
			return nil
		}
		if r.loseMsg != nil && r.loseMsg(m.Seq, r.deliveries[m.Seq]) {
			return nil // as if lost in flight: never seen, never acknowledged
		}
		if r.loseAck != nil && r.loseAck(m.Seq, r.deliveries[m.Seq]) {
			m.Ack = func() error { return nil } // the acknowledgement never reaches the server
		}
		i, err := strconv.Atoi(string(m.Data))
		if err != nil {
			return err
		}
		r.processed[m.Seq]++
		r.payload[m.Seq] = i
		if ts[i].After(r.newest) {
			r.newest = ts[i]
		}
		r.waiting = append(r.waiting, waitingAck{ts[i], m.Ack})
		wm := r.newest.Add(-r.wmLag)
		if r.ackAll {
			wm = r.newest.Add(time.Hour)
		}
		if _, err := r.ackThrough(wm); err != nil {
			return err
		}
		r.count <- len(r.processed)
		return nil
	})
	if err != nil {
		c.Close()
		t.Fatal(err)
	}
	return r
}

// stop stops the run's consumer, waiting up to 5 s, and drains its
// connection.
func (r *consumerRun) stop(t *testing.T) {
	t.Helper()
	if err := r.cons.Stop(ctxT(t, 5*time.Second)); err != nil {
		t.Fatal(err)
	}
	drainConn(t, r.conn)
}

func (r *consumerRun) waitCount(t *testing.T, n int, d time.Duration) {
	t.Helper()
	receiveUntil(t, r.count, d, func(k int) bool { return k >= n }, func() string {
		r.mu.Lock()
		defer r.mu.Unlock()
		return fmt.Sprintf("processed %d messages, want %d within %v", len(r.processed), n, d)
	})
}

// TestJetStreamCrashRestartRedelivers: a consumer processes part of a
// stream, acknowledging by watermark (out of sequence order, some
// acknowledgements lost), and dies without acknowledging the rest
// (connection closed, no drain). A new process on the same durable is
// reset to the server's acknowledgement floor: every message the first
// process did not get acknowledged arrives again at once, in sequence
// order, long before AckWait (30 s), together with those acknowledged out
// of order above the floor (at least once; the service skips the frames
// its checkpoint already holds). In the end every message is acknowledged.
func TestJetStreamCrashRestartRedelivers(t *testing.T) {
	const n = 400
	url, ts := jetStreamEvents(t, n)
	cfg := JetStreamConfig{
		Stream: "READINGS", Durable: "modewatch", CreateStream: true,
		StreamSubjects: []string{"plant.readings.>"}, FilterSubjects: []string{"plant.readings.>"},
		// Every 7th acknowledgement is lost (about 41 of the first 290),
		// and each holds a MaxAckPending slot until AckWait (30 s); 128
		// leaves room for the messages waiting for the watermark, so a
		// loaded machine does not starve intake before the 290th message.
		MaxAckPending: 128, PullBatch: 16,
	}

	r1 := startRun(t, url, cfg, ts, 20*time.Second)
	r1.mu.Lock()
	r1.loseAck = func(seq uint64, _ int) bool { return seq%7 == 3 } // acknowledgements lost in the crash
	r1.limit = 290
	r1.mu.Unlock()
	publishN(t, r1.conn.NATS(), "plant.readings.unit1", 1, n)
	r1.waitCount(t, r1.limit, time.Minute)
	if err := r1.cons.Stop(ctxT(t, 5*time.Second)); err != nil {
		t.Fatal(err)
	}
	if err := r1.conn.NATS().Flush(); err != nil { // the acknowledgements made reach the server
		t.Fatal(err)
	}
	r1.mu.Lock()
	waiting := len(r1.waiting)
	r1.mu.Unlock()
	r1.conn.Close() // crash: no drain; waiting messages stay unacknowledged
	if waiting == 0 {
		t.Fatal("first process: nothing waiting for the watermark at the crash")
	}
	// MaxAckPending bounds what the first process could hold unacknowledged.
	if waiting > cfg.MaxAckPending {
		t.Errorf("%d waiting, above MaxAckPending %d", waiting, cfg.MaxAckPending)
	}

	r2 := startRun(t, url, JetStreamConfig{
		Stream: cfg.Stream, Durable: cfg.Durable, MaxAckPending: cfg.MaxAckPending,
	}, ts, 0)
	r2.mu.Lock()
	r2.ackAll = true
	r2.mu.Unlock()
	// The lowest lost acknowledgement is seq 3: the server's floor stays at
	// 2, so the reset delivers seqs 3..n again, within seconds: 20 s at
	// most, still short of the AckWait (30 s) after which the server would
	// deliver them again without the reset.
	r2.waitCount(t, n-2, 20*time.Second)

	r2.mu.Lock()
	for seq := uint64(1); seq <= n; seq++ {
		if r1.processed[seq]+r2.processed[seq] == 0 {
			t.Errorf("message seq %d never processed", seq)
		}
		if seq >= 3 && r2.processed[seq] != 1 {
			t.Errorf("seq %d (above the floor) fed %d times by the second process, want 1", seq, r2.processed[seq])
		}
	}
	if r2.processed[1]+r2.processed[2] != 0 {
		t.Error("the second process got messages at or below the acknowledgement floor")
	}
	r2.mu.Unlock()
	// Everything acknowledged on the server in the end.
	waitFor(t, time.Minute, "ack floor at the last message", func() bool {
		ci, err := r2.cons.Info(ctxT(t, 5*time.Second))
		return err == nil && ci.AckFloor.Stream == n && ci.NumAckPending == 0 && ci.NumPending == 0
	})
	r2.stop(t)
}

// TestJetStreamRedelivery: with a short AckWait and a stalled watermark the
// server delivers waiting messages again, and some acknowledgements are
// lost (fault injected). Once the watermark moves, every delivery is
// acknowledged, and in the end nothing is left unacknowledged on the
// server.
func TestJetStreamRedelivery(t *testing.T) {
	const n = 60
	url, ts := jetStreamEvents(t, n)
	cfg := JetStreamConfig{
		Stream: "R", Durable: "d", CreateStream: true, StreamSubjects: []string{"r.>"},
		AckWait: 300 * time.Millisecond, MaxAckPending: 100,
	}
	r := startRun(t, url, cfg, ts, 1000*time.Hour) // watermark stalled
	r.mu.Lock()
	r.loseAck = func(seq uint64, delivery int) bool { return seq%5 == 0 && delivery == 1 }
	r.mu.Unlock()
	publishN(t, r.conn.NATS(), "r.x", 1, n)
	r.waitCount(t, n, time.Minute)
	waitFor(t, time.Minute, "redeliveries", func() bool { return r.cons.Stats().Redelivered >= n })
	// Release the watermark, and acknowledge what comes from now on at once.
	r.mu.Lock()
	r.ackAll = true
	if _, err := r.ackThrough(ts[n].Add(time.Hour)); err != nil {
		t.Error(err)
	}
	r.mu.Unlock()
	// Lost acknowledgements (seq%5 == 0, first delivery) come back after
	// AckWait and are acknowledged then.
	waitFor(t, time.Minute, "everything acknowledged", func() bool {
		ci, err := r.cons.Info(ctxT(t, 5*time.Second))
		return err == nil && ci.AckFloor.Stream == n && ci.NumAckPending == 0
	})
	r.mu.Lock()
	for seq := uint64(1); seq <= n; seq++ {
		if r.processed[seq] < 1 {
			t.Errorf("seq %d never fed", seq)
		}
	}
	r.mu.Unlock()
	r.stop(t)
}

// TestJetStreamMaxAckPendingBackpressure: with nothing acknowledged the
// server delivers exactly MaxAckPending messages and holds the rest back,
// which is how intake slows when processing falls behind.
func TestJetStreamMaxAckPendingBackpressure(t *testing.T) {
	const n, maxAck = 200, 25
	url, ts := jetStreamEvents(t, n)
	r := startRun(t, url, JetStreamConfig{
		Stream: "B", Durable: "b", CreateStream: true, StreamSubjects: []string{"b"}, MaxAckPending: maxAck,
	}, ts, 1000*time.Hour)
	publishN(t, r.conn.NATS(), "b", 1, n)
	r.waitCount(t, maxAck, time.Minute)
	var ci *jetstream.ConsumerInfo
	waitFor(t, time.Minute, "server-side pending counts", func() bool {
		var err error
		ci, err = r.cons.Info(ctxT(t, 5*time.Second))
		return err == nil && ci.NumAckPending == maxAck && ci.NumPending == n-maxAck
	})
	if got := r.cons.Stats().Delivered; got != maxAck {
		t.Errorf("delivered %d, want %d (MaxAckPending)", got, maxAck)
	}
	// Acknowledging 10 lets exactly 10 more in.
	r.mu.Lock()
	if _, err := r.ackThrough(ts[1].Add(-time.Nanosecond)); err != nil { // acknowledges nothing
		t.Error(err)
	}
	acked, err := r.ackThrough(maxEventOf(ts[:11]).Add(time.Nanosecond))
	r.mu.Unlock()
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, time.Minute, "more deliveries after acks", func() bool {
		return r.cons.Stats().Delivered == uint64(maxAck+acked)
	})
	r.stop(t)
}

func maxEventOf(ts []time.Time) time.Time {
	var m time.Time
	for _, t := range ts {
		if t.After(m) {
			m = t
		}
	}
	return m
}

// TestServerRestartReconnect: the server is shut down mid-stream and a new
// one started on the same port and store directory. The client reports
// disconnected and reconnected through its callback, the consumer carries on
// and the JetStream data published before the restart is all there.
func TestServerRestartReconnect(t *testing.T) {
	checkNoLeak(t)
	opts := natstest.JetStreamOptions(t)
	s1 := natstest.Run(t, opts)
	url := s1.ClientURL()

	const n1, n2 = 50, 50
	ev := newEventRecorder()
	c, err := Connect(ctxT(t, 5*time.Second), Options{
		URLs: []string{url}, ReconnectWait: 20 * time.Millisecond, MaxReconnectWait: 100 * time.Millisecond,
		ReconnectJitter: -1, OnEvent: ev.on,
	}, nil)
	if err != nil {
		t.Fatal(err)
	}
	ev.wait(t, EventConnected, time.Minute)
	var mu sync.Mutex
	fed := map[int]int{}
	got := make(chan int, 1024)
	cons, err := c.ConsumeJetStream(ctxT(t, 10*time.Second), JetStreamConfig{
		Stream: "S", Durable: "d", CreateStream: true, StreamSubjects: []string{"s.>"},
	}, func(m Msg) error {
		i, _ := strconv.Atoi(string(m.Data))
		mu.Lock()
		fed[i]++
		first := fed[i] == 1
		mu.Unlock()
		err := m.Ack()
		if first {
			got <- i
		}
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	pub, err := nats.Connect(url, nats.ReconnectWait(20*time.Millisecond), nats.MaxReconnects(-1))
	if err != nil {
		t.Fatal(err)
	}
	defer pub.Close()
	publishN(t, pub, "s.a", 1, n1)
	for range n1 {
		select {
		case <-got:
		case <-time.After(time.Minute):
			t.Fatal("first batch not consumed")
		}
	}
	if err := c.NATS().Flush(); err != nil { // acknowledgements reach the server
		t.Fatal(err)
	}

	s1.Shutdown()
	s1.WaitForShutdown()
	if e := ev.wait(t, EventDisconnected, time.Minute); c.State() != StateReconnecting && c.State() != StateConnected {
		t.Errorf("after %v: state %v", e, c.State())
	}
	s2 := natstest.Restart(t, s1, opts)
	e := ev.wait(t, EventReconnected, time.Minute)
	if c.State() != StateConnected {
		t.Errorf("state %v after reconnect to %s", c.State(), e.URL)
	}
	if st := c.Stats(); st.Reconnects != 1 || st.Disconnects != 1 {
		t.Errorf("conn stats %+v, want 1 disconnect and 1 reconnect", st)
	}
	// Data published before the restart survived in the store directory.
	js, err := jetstream.New(c.NATS())
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, time.Minute, "stream back after restart", func() bool {
		st, err := js.Stream(ctxT(t, 2*time.Second), "S")
		return err == nil && st.CachedInfo().State.Msgs == n1 && st.CachedInfo().State.FirstSeq == 1
	})
	waitFor(t, time.Minute, "publisher reconnected", pub.IsConnected)
	publishN(t, pub, "s.a", n1+1, n1+n2)
	for range n2 {
		select {
		case <-got:
		case <-time.After(time.Minute):
			t.Fatal("second batch not consumed after the restart")
		}
	}
	mu.Lock()
	for i := 1; i <= n1+n2; i++ {
		if fed[i] == 0 {
			t.Errorf("message %d never fed", i)
		}
	}
	mu.Unlock()
	waitFor(t, time.Minute, "all acknowledged", func() bool {
		ci, err := cons.Info(ctxT(t, 2*time.Second))
		return err == nil && ci.AckFloor.Stream == n1+n2 && ci.NumAckPending == 0
	})
	if err := cons.Stop(ctxT(t, 5*time.Second)); err != nil {
		t.Fatal(err)
	}
	drainConn(t, c)
	ev.wait(t, EventClosed, time.Minute)
	if c.State() != StateClosed {
		t.Errorf("state %v after drain", c.State())
	}
	_ = s2
}

// TestJetStreamConfigErrors: a missing stream is refused unless it may be
// created, and an incomplete configuration is refused with every problem
// named at once.
func TestJetStreamConfigErrors(t *testing.T) {
	checkNoLeak(t)
	c := connectLocal(t)
	h := func(Msg) error { return nil }
	_, err := c.ConsumeJetStream(ctxT(t, 5*time.Second), JetStreamConfig{Stream: "missing", Durable: "d"}, h)
	if !errors.Is(err, jetstream.ErrStreamNotFound) {
		t.Errorf("missing stream without create: %v", err)
	}
	_, err = c.ConsumeJetStream(ctxT(t, 5*time.Second), JetStreamConfig{CreateStream: true}, h)
	if !errors.Is(err, ErrConfig) {
		t.Fatalf("empty config: %v, want ErrConfig", err)
	}
	mustContain(t, err, "stream name is required", "durable consumer name is required", "create_stream needs stream_subjects")
}

// TestJetStreamLostDelivery: a delivery that never reaches the process
// (lost in flight) is not acknowledged, so the server's acknowledgement
// floor stops below it, and the server sends it again after AckWait,
// although newer messages were processed and acknowledged meanwhile. The
// AckWait is 3 s: every other message is fed once only if its
// acknowledgement reaches the server within AckWait, which a loaded
// machine could delay past a few hundred milliseconds.
func TestJetStreamLostDelivery(t *testing.T) {
	const n, lost = 40, 10
	url, ts := jetStreamEvents(t, n)
	r := startRun(t, url, JetStreamConfig{
		Stream: "L", Durable: "d", CreateStream: true, StreamSubjects: []string{"l"},
		AckWait: 3 * time.Second,
	}, ts, 0)
	r.mu.Lock()
	r.ackAll = true
	r.loseMsg = func(seq uint64, delivery int) bool { return seq == lost && delivery == 1 }
	r.mu.Unlock()
	publishN(t, r.conn.NATS(), "l", 1, n)
	r.waitCount(t, n, time.Minute)
	r.mu.Lock()
	for seq := uint64(1); seq <= n; seq++ {
		if r.processed[seq] != 1 {
			t.Errorf("seq %d fed %d times, want 1", seq, r.processed[seq])
		}
	}
	if r.deliveries[lost] != 2 {
		t.Errorf("seq %d delivered %d times, want 2 (lost, then after AckWait)", lost, r.deliveries[lost])
	}
	r.mu.Unlock()
	waitFor(t, time.Minute, "floor at the end", func() bool {
		ci, err := r.cons.Info(ctxT(t, 2*time.Second))
		return err == nil && ci.AckFloor.Stream == n && ci.NumAckPending == 0
	})
	r.stop(t)
}

// TestJetStreamDoneOnClose: when the connection closes under a running
// consumer, Done is closed and Err says why.
func TestJetStreamDoneOnClose(t *testing.T) {
	checkNoLeak(t)
	s := natstest.StartJetStream(t)
	c, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{s.ClientURL()}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	cons, err := c.ConsumeJetStream(ctxT(t, 5*time.Second), JetStreamConfig{
		Stream: "C", Durable: "d", CreateStream: true, StreamSubjects: []string{"c"},
	}, func(Msg) error { return nil })
	if err != nil {
		t.Fatal(err)
	}
	if cons.Err() != nil {
		t.Fatalf("Err before done: %v", cons.Err())
	}
	c.Close()
	select {
	case <-cons.Done():
	case <-time.After(time.Minute):
		t.Fatal("consumer not done after the connection closed")
	}
	if !errors.Is(cons.Err(), ErrClosed) {
		t.Errorf("Err = %v, want ErrClosed", cons.Err())
	}
	if err := cons.Stop(ctxT(t, time.Second)); err != nil {
		t.Errorf("Stop after done: %v", err)
	}
}
