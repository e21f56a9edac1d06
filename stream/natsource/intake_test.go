package natsource_test

import (
	"context"
	"fmt"
	"math"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"modewatch/stream"
	"modewatch/stream/natsource"
	"modewatch/stream/natsource/natstest"
)

// The end-to-end path: line protocol published through JetStream, fed into
// the stream package's decode → map → align (stream.Intake), acknowledged
// by the aligner's watermark through an AckTracker.

var e2eT0 = time.Date(2026, 3, 1, 6, 0, 0, 0, time.UTC)

// e2ePayload is message k (k = 0..n): pump2's readings for second k and
// pump3's for second k-1 (pump3's gateway reports one message late), so a
// frame's readings come from two consecutive messages. Values encode the
// second so frames can be checked: pump2 flow = s, temp = 20 + s/100;
// pump3 flow = 1000 + s.
func e2ePayload(k, n int) []byte {
	var b strings.Builder
	if k < n {
		ts := e2eT0.Add(time.Duration(k) * time.Second).UnixNano()
		fmt.Fprintf(&b, "coolwater,asset=pump2 flow=%d,temp=%g %d\n", k, 20+float64(k)/100, ts)
	}
	if k > 0 {
		ts := e2eT0.Add(time.Duration(k-1) * time.Second).UnixNano()
		fmt.Fprintf(&b, "coolwater,asset=pump3 flow=%di %d\n", 1000+k-1, ts)
	}
	return []byte(b.String())
}

// frameLog collects frames by start second, as values keyed by channel name
// (the registry of each process discovers the channels anew).
type frameLog struct {
	mu     sync.Mutex
	frames map[int][]map[string]float64
}

func (l *frameLog) add(ch *stream.Channels, f *stream.Frame) {
	l.mu.Lock()
	defer l.mu.Unlock()
	vals := map[string]float64{}
	for i, v := range f.Values {
		if !f.Missing[i] {
			vals[ch.Channel(i).Name] = v
		}
	}
	s := int(f.Start.Sub(e2eT0) / time.Second)
	l.frames[s] = append(l.frames[s], vals)
}

// process is one life of the consuming service.
type process struct {
	conn   *natsource.Conn
	cons   *natsource.JSConsumer
	in     *stream.Intake
	tr     *natsource.AckTracker
	fed    chan uint64
	mu     sync.Mutex
	limit  int // > 0: the process dies after feeding this many messages
	nFed   int
	errors []error
}

func startProcess(t *testing.T, url string, resume *natsource.Checkpoint, frames *frameLog, limit int) *process {
	t.Helper()
	var cp natsource.Checkpoint
	if resume != nil {
		cp = *resume
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	c, err := natsource.Connect(ctx, natsource.Options{URLs: []string{url}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	ch, err := stream.NewChannels(nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	p := &process{conn: c, tr: natsource.NewAckTracker(0, cp), fed: make(chan uint64, 4096), limit: limit}
	p.in, err = stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: time.Second, Staleness: time.Second}},
		func(f *stream.Frame) error {
			// After a restart, frames starting before the checkpoint's
			// watermark were processed by the previous life.
			if f.Start.Before(cp.Watermark) {
				return nil
			}
			frames.add(ch, f)
			return nil
		})
	if err != nil {
		t.Fatal(err)
	}
	p.cons, err = c.ConsumeJetStream(ctx, natsource.JetStreamConfig{
		Stream: "PLANT", Durable: "modewatch", CreateStream: true, StreamSubjects: []string{"plant.readings.>"},
		MaxAckPending: 64, Resume: resume, Tracker: p.tr, FloorEvery: 20 * time.Millisecond,
	}, func(m natsource.Msg) error {
		p.mu.Lock()
		defer p.mu.Unlock()
		if p.limit > 0 && p.nFed >= p.limit {
			return nil // dead: nothing more is processed or acknowledged
		}
		if !p.tr.Admit(m) {
			return nil
		}
		latest, err := p.in.Feed(m.Subject, m.Data)
		if err != nil {
			p.errors = append(p.errors, err)
			return err
		}
		if err := p.tr.Add(m, latest); err != nil {
			return err
		}
		if _, err := p.tr.AckThrough(p.in.Watermark()); err != nil {
			return err
		}
		p.nFed++
		p.fed <- m.Seq
		return nil
	})
	if err != nil {
		c.Close()
		t.Fatal(err)
	}
	return p
}

func (p *process) waitFed(t *testing.T, n int) {
	t.Helper()
	timer := time.NewTimer(20 * time.Second)
	defer timer.Stop()
	for got := 0; got < n; got++ {
		select {
		case <-p.fed:
		case <-timer.C:
			t.Fatalf("fed %d of %d messages", got, n)
		}
	}
}

// TestIntakeJetStreamExactlyOnce publishes line-protocol messages through
// JetStream, feeds them into the stream package's Intake, acknowledges by
// its watermark, kills the consumer before some are acknowledged, restarts
// from the checkpoint, and checks that every frame is delivered exactly once
// across both lives, complete and with the published values.
func TestIntakeJetStreamExactlyOnce(t *testing.T) {
	url := natstest.StartJetStream(t).ClientURL()

	const n = 120      // seconds of data; messages 0..n
	const crashAt = 70 // messages fed by the first life
	frames := &frameLog{frames: map[int][]map[string]float64{}}

	p1 := startProcess(t, url, nil, frames, crashAt)
	pub, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer pub.Close()
	js, err := jetstream.New(pub)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	for k := 0; k <= n; k++ {
		if _, err := js.Publish(ctx, "plant.readings.coolwater", e2ePayload(k, n)); err != nil {
			t.Fatal(err)
		}
	}
	p1.waitFed(t, crashAt)
	// Let the floor sync catch up with the acknowledgements, as it does
	// between checkpoints in the service: messages 0..67 (stream seqs
	// 1..68) have latest event times before the watermark of 68 s.
	deadline := time.Now().Add(10 * time.Second)
	for p1.tr.Checkpoint().Seq != 68 {
		if time.Now().After(deadline) {
			t.Fatalf("checkpoint seq %d, want 68", p1.tr.Checkpoint().Seq)
		}
		time.Sleep(5 * time.Millisecond) // polling a condition under a deadline
	}
	if err := p1.cons.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	p1.mu.Lock()
	cp := p1.tr.Checkpoint()
	st1 := p1.tr.Stats()
	p1.mu.Unlock()
	p1.conn.Close() // crash: no drain, no flush of the intake
	if st1.Waiting == 0 {
		t.Fatalf("first life: checkpoint %+v, stats %+v: want acknowledged and waiting messages", cp, st1)
	}
	t.Logf("first life: checkpoint seq %d, watermark %v; %+v", cp.Seq, cp.Watermark.Sub(e2eT0), st1)

	p2 := startProcess(t, url, &cp, frames, 0)
	p2.waitFed(t, n+1-int(cp.Seq))
	if err := p2.in.Flush(); err != nil { // end of the test's input: emit the rest
		t.Fatal(err)
	}
	p2.mu.Lock()
	if _, err := p2.tr.AckThrough(p2.in.Watermark()); err != nil {
		t.Error(err)
	}
	st2 := p2.tr.Stats()
	p2.mu.Unlock()
	t.Logf("second life: %+v; intake %+v", st2, p2.in.Stats())
	if st2.Waiting != 0 {
		t.Errorf("second life left %d messages unacknowledged after the final frames", st2.Waiting)
	}

	frames.mu.Lock()
	for s := 0; s < n; s++ {
		got := frames.frames[s]
		if len(got) != 1 {
			t.Errorf("frame %d s delivered %d times, want exactly once", s, len(got))
			continue
		}
		want := map[string]float64{
			"coolwater.pump2.flow": float64(s),
			"coolwater.pump2.temp": 20 + float64(s)/100,
			"coolwater.pump3.flow": float64(1000 + s),
		}
		for name, w := range want {
			if v, ok := got[0][name]; !ok || math.Abs(v-w) > 1e-12 {
				t.Errorf("frame %d s: %s = %v (present %v), want %v", s, name, v, ok, w)
			}
		}
	}
	for s := range frames.frames {
		if s < 0 || s >= n {
			t.Errorf("unexpected frame at %d s", s)
		}
	}
	frames.mu.Unlock()

	// Every message acknowledged on the server.
	deadline = time.Now().Add(10 * time.Second)
	for {
		ci, err := p2.cons.Info(ctx)
		if err == nil && ci.AckFloor.Stream == n+1 && ci.NumAckPending == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("server still has unacknowledged messages: %+v %v", ci, err)
		}
		time.Sleep(10 * time.Millisecond) // polling a condition under a deadline
	}
	if err := p2.cons.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	if err := p2.conn.Drain(ctx); err != nil {
		t.Fatal(err)
	}
}
