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
// by the aligner's watermark (Intake.FeedAck) once a checkpoint holds the
// frames, as the service does.

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

// checkpoint is what the service saves with the model state: the last
// frame processed and the readings that frame carried.
type checkpoint struct {
	to   time.Time
	last []seed
}

type seed struct {
	name string
	v    float64
	t    time.Time
}

// process is one life of the consuming service: JetStream messages fed to
// the Intake with FeedAck, acknowledgements held until a checkpoint holds
// the frames they contributed to, frames the previous life's checkpoint
// holds skipped, and its carried readings seeded.
type process struct {
	conn   *natsource.Conn
	cons   *natsource.JSConsumer
	in     *stream.Intake
	fed    chan uint64
	frames *frameLog

	mu      sync.Mutex
	held    []func() error // acknowledgements waiting for the next checkpoint
	last    time.Time      // start of the last frame processed
	carried []seed         // the readings it carried
	limit   int            // > 0: the process dies after feeding this many messages
	ckptAt  int            // > 0: a checkpoint after feeding this many messages (and whenever 32 acknowledgements wait)
	ckpt    checkpoint
	nFed    int
	errors  []error
}

func startProcess(t *testing.T, url string, resume *checkpoint, frames *frameLog, limit, ckptAt int) *process {
	t.Helper()
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
	p := &process{conn: c, fed: make(chan uint64, 4096), frames: frames, limit: limit, ckptAt: ckptAt}
	// The frame handler runs inside FeedAck or Flush, with p.mu held.
	p.in, err = stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: time.Second, Staleness: time.Second}},
		func(f *stream.Frame) error {
			if resume != nil && !f.Start.After(resume.to) {
				return nil // the checkpoint holds it
			}
			frames.add(ch, f)
			p.last, p.carried = f.Start, p.carried[:0]
			for i, v := range f.Values {
				if !f.Missing[i] {
					p.carried = append(p.carried, seed{ch.Channel(i).Name, v, time.Unix(0, f.Times[i]).UTC()})
				}
			}
			return nil
		})
	if err != nil {
		t.Fatal(err)
	}
	if resume != nil {
		for _, s := range resume.last {
			if err := p.in.SeedLast(s.name, s.v, s.t); err != nil {
				t.Fatal(err)
			}
		}
	}
	p.cons, err = c.ConsumeJetStream(ctx, natsource.JetStreamConfig{
		Stream: "PLANT", Durable: "modewatch", CreateStream: true, StreamSubjects: []string{"plant.readings.>"},
		MaxAckPending: 64,
	}, func(m natsource.Msg) error {
		p.mu.Lock()
		defer p.mu.Unlock()
		if p.limit > 0 && p.nFed >= p.limit {
			return nil // dead: nothing more is processed or acknowledged
		}
		err := p.in.FeedAck(m.Subject, m.Data, func() error {
			p.held = append(p.held, m.Ack)
			return nil
		})
		if err != nil {
			p.errors = append(p.errors, err)
			return err
		}
		p.nFed++
		// Like the service, a checkpoint also comes early once the held
		// acknowledgements reach half of MaxAckPending, before the server
		// stops delivering.
		if p.nFed == p.ckptAt || len(p.held) >= 32 {
			p.ckpt = p.checkpointLocked()
		}
		p.fed <- m.Seq
		return nil
	})
	if err != nil {
		c.Close()
		t.Fatal(err)
	}
	return p
}

// checkpointLocked saves the state (here: the last frame and its carried
// readings) and then acknowledges the messages it covers. Called with p.mu
// held.
func (p *process) checkpointLocked() checkpoint {
	cp := checkpoint{to: p.last, last: append([]seed(nil), p.carried...)}
	for _, ack := range p.held {
		if err := ack(); err != nil {
			p.errors = append(p.errors, err)
		}
	}
	p.held = nil
	return cp
}

// waitSeq waits until the message with stream sequence seq is fed.
func (p *process) waitSeq(t *testing.T, seq uint64) {
	t.Helper()
	timer := time.NewTimer(time.Minute)
	defer timer.Stop()
	for {
		select {
		case s := <-p.fed:
			if s == seq {
				return
			}
		case <-timer.C:
			p.mu.Lock()
			defer p.mu.Unlock()
			t.Fatalf("message seq %d not fed; %d fed, errors %v", seq, p.nFed, p.errors)
		}
	}
}

// TestIntakeJetStreamRestart publishes line-protocol messages through
// JetStream and runs the service's restart design end to end with the
// stream package's Intake: acknowledgements by the aligner's watermark
// (FeedAck), held until a checkpoint; a crash some messages after the
// checkpoint; a restart that resets the consumer to its acknowledgement
// floor, seeds the checkpoint's carried readings and skips the frames the
// checkpoint holds. Every frame is then processed exactly once, counting
// the first life up to its checkpoint and the second life after it,
// complete and with the published values.
func TestIntakeJetStreamRestart(t *testing.T) {
	url := natstest.StartJetStream(t).ClientURL()

	const n = 120      // seconds of data; messages 0..n, stream seqs 1..n+1
	const ckptAt = 50  // a checkpoint after this many messages
	const crashAt = 70 // messages fed by the first life
	first := &frameLog{frames: map[int][]map[string]float64{}}
	p1 := startProcess(t, url, nil, first, crashAt, ckptAt)
	pub, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer pub.Close()
	js, err := jetstream.New(pub)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	for k := 0; k <= n; k++ {
		if _, err := js.Publish(ctx, "plant.readings.coolwater", e2ePayload(k, n)); err != nil {
			t.Fatal(err)
		}
	}
	p1.waitSeq(t, crashAt)
	if err := p1.cons.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	if err := p1.conn.NATS().Flush(); err != nil { // the checkpoint's acknowledgements reach the server
		t.Fatal(err)
	}
	p1.mu.Lock()
	cp := p1.ckpt
	p1.mu.Unlock()
	p1.conn.Close() // crash: no drain, no flush of the intake, no further checkpoint
	to := int(cp.to.Sub(e2eT0) / time.Second)
	if cp.to.IsZero() || len(cp.last) != 3 {
		t.Fatalf("checkpoint after %d messages: last frame %v, %d carried readings; want a frame and 3", ckptAt, cp.to, len(cp.last))
	}
	t.Logf("first life: checkpoint at frame %d s, crash after %d messages", to, crashAt)

	second := &frameLog{frames: map[int][]map[string]float64{}}
	p2 := startProcess(t, url, &cp, second, 0, 0)
	p2.waitSeq(t, n+1)
	p2.mu.Lock()
	if err := p2.in.Flush(); err != nil { // end of the test's input: emit the rest
		t.Error(err)
	}
	p2.checkpointLocked()
	errs := append(p1.errors, p2.errors...)
	p2.mu.Unlock()
	if len(errs) > 0 {
		t.Errorf("errors: %v", errs)
	}

	first.mu.Lock()
	second.mu.Lock()
	for s := 0; s < n; s++ {
		got := second.frames[s]
		if s <= to {
			got = append(first.frames[s], got...)
		}
		if len(got) != 1 {
			t.Errorf("frame %d s processed %d times (checkpoint at %d s), want exactly once", s, len(got), to)
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
	for s := range second.frames {
		if s <= to || s >= n {
			t.Errorf("second life: unexpected frame at %d s", s)
		}
	}
	second.mu.Unlock()
	first.mu.Unlock()

	// Every message acknowledged on the server.
	deadline := time.Now().Add(time.Minute)
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
