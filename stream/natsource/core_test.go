package natsource

import (
	"errors"
	"fmt"
	"slices"
	"sync"
	"testing"
	"time"

	"modewatch/stream/natsource/natstest"
)

// TestCoreWildcardSubjects checks that a core subscription on several
// subjects with "*" and ">" wildcards receives exactly the matching
// messages. Matching rules as the NATS subject-based messaging
// documentation states them (cited from memory): "*" matches exactly one
// token, ">" one or more trailing tokens.
func TestCoreWildcardSubjects(t *testing.T) {
	checkNoLeak(t)
	c := connectLocal(t)

	var (
		mu  sync.Mutex
		got []string
	)
	sub, err := c.SubscribeCore(ctxT(t, 5*time.Second), CoreConfig{
		Subjects: []string{"plant.readings.*", "plant.events.>"},
	}, func(m Msg) error {
		if m.Seq != 0 {
			return fmt.Errorf("core message with seq %d", m.Seq)
		}
		if err := m.Ack(); err != nil {
			return err
		}
		mu.Lock()
		got = append(got, m.Subject+"="+string(m.Data))
		mu.Unlock()
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	nc := c.NATS()
	pubs := []struct {
		subj  string
		match bool
	}{
		{"plant.readings.coolwater", true},
		{"plant.readings.boiler", true},
		{"plant.readings.coolwater.extra", false}, // "*" is one token only
		{"plant.events.boiler", true},
		{"plant.events.boiler.trip.a", true}, // ">" spans tokens
		{"plant.events", false},              // ">" needs at least one token
		{"other.readings.coolwater", false},
	}
	var want []string
	for i, p := range pubs {
		data := fmt.Sprint(i)
		if err := nc.Publish(p.subj, []byte(data)); err != nil {
			t.Fatal(err)
		}
		if p.match {
			want = append(want, p.subj+"="+data)
		}
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	// A sentinel on a matching subject, published last, marks the end.
	if err := nc.Publish("plant.readings.zz", []byte("end")); err != nil {
		t.Fatal(err)
	}
	want = append(want, "plant.readings.zz=end")
	waitFor(t, time.Minute, "all matching messages", func() bool { return sub.Stats().Delivered >= uint64(len(want)) })
	if err := sub.Stop(ctxT(t, 5*time.Second)); err != nil {
		t.Fatal(err)
	}
	mu.Lock()
	defer mu.Unlock()
	slices.Sort(got)
	slices.Sort(want)
	if !slices.Equal(got, want) {
		t.Errorf("received\n%q\nwant\n%q", got, want)
	}
	st := sub.Stats()
	if st.Dropped != 0 || st.HandlerErrors != 0 || st.Received != uint64(len(want)) {
		t.Errorf("stats %+v, want %d received, none dropped", st, len(want))
	}
	if err := sub.Stop(ctxT(t, time.Second)); err != nil {
		t.Errorf("second Stop: %v", err)
	}
}

// TestCoreOverflowBounded checks backpressure on core NATS: with the
// handler blocked, at most QueueMsgs messages wait, the rest are dropped and
// counted, an overflow event is reported, and once released the handler
// gets exactly the queued ones.
func TestCoreOverflowBounded(t *testing.T) {
	checkNoLeak(t)
	s := natstest.StartJetStream(t)
	ev := newEventRecorder()
	c, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{s.ClientURL()}, OnEvent: ev.on}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer drainConn(t, c)

	const (
		n      = 2000
		qMsgs  = 16
		qBytes = 1 << 20
	)
	release := make(chan struct{})
	var releaseOnce sync.Once
	defer releaseOnce.Do(func() { close(release) }) // on failure too, so Stop can finish
	entered := make(chan struct{}, 1)
	var delivered []int
	sub, err := c.SubscribeCore(ctxT(t, 5*time.Second), CoreConfig{
		Subjects: []string{"fast.>"}, QueueMsgs: qMsgs, QueueBytes: qBytes,
	}, func(m Msg) error {
		select {
		case entered <- struct{}{}:
		default:
		}
		<-release
		var i int
		fmt.Sscan(string(m.Data), &i)
		delivered = append(delivered, i)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	nc := c.NATS()
	if err := nc.Publish("fast.x", []byte("0")); err != nil {
		t.Fatal(err)
	}
	<-entered // the handler now blocks on message 0
	for i := 1; i < n; i++ {
		if err := nc.Publish("fast.x", fmt.Appendf(nil, "%d", i)); err != nil {
			t.Fatal(err)
		}
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	waitFor(t, time.Minute, "all messages received", func() bool { st := sub.Stats(); return st.Received+st.LibDropped == n })
	st := sub.Stats()
	// Conservation: 1 in the handler + qMsgs queued + dropped = n.
	if st.Queued != qMsgs || st.Dropped != n-1-qMsgs || st.Delivered != 1 || st.LibDropped != 0 {
		t.Errorf("stats %+v, want queued %d, dropped %d, delivered 1", st, qMsgs, n-1-qMsgs)
	}
	if st.QueuedBytes > qBytes {
		t.Errorf("queued bytes %d above bound %d", st.QueuedBytes, qBytes)
	}
	e := ev.wait(t, EventError, time.Minute)
	if !errors.Is(e.Err, ErrOverflow) {
		t.Errorf("overflow event error %v, want ErrOverflow", e.Err)
	}
	releaseOnce.Do(func() { close(release) })
	if err := sub.Stop(ctxT(t, 5*time.Second)); err != nil {
		t.Fatal(err)
	}
	// The handler saw message 0 and then the first qMsgs queued (FIFO).
	want := make([]int, qMsgs+1)
	for i := range want {
		want[i] = i
	}
	if !slices.Equal(delivered, want) {
		t.Errorf("delivered %v, want %v", delivered, want)
	}
}

// TestCoreOverflowBytes checks the byte bound of the queue.
func TestCoreOverflowBytes(t *testing.T) {
	checkNoLeak(t)
	c := connectLocal(t)
	release := make(chan struct{})
	var releaseOnce sync.Once
	defer releaseOnce.Do(func() { close(release) })
	entered := make(chan struct{}, 1)
	sub, err := c.SubscribeCore(ctxT(t, 5*time.Second), CoreConfig{
		Subjects: []string{"big"}, QueueBytes: 10_000,
	}, func(m Msg) error {
		select {
		case entered <- struct{}{}:
		default:
		}
		<-release
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	payload := make([]byte, 1000)
	nc := c.NATS()
	if err := nc.Publish("big", payload); err != nil {
		t.Fatal(err)
	}
	<-entered
	for range 100 {
		if err := nc.Publish("big", payload); err != nil {
			t.Fatal(err)
		}
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	waitFor(t, time.Minute, "all received", func() bool { st := sub.Stats(); return st.Received+st.LibDropped == 101 })
	st := sub.Stats()
	// 10 000 bytes of queue hold exactly 10 messages of 1000 bytes; the
	// client library's list has the same byte bound, so the 90 others are
	// dropped by one stage or the other.
	if st.Queued != 10 || st.QueuedBytes != 10_000 || st.Dropped != 90 ||
		st.DroppedBytes != 1000*(st.Dropped-st.LibDropped) {
		t.Errorf("stats %+v, want 10 queued (10000 B), 90 dropped", st)
	}
	releaseOnce.Do(func() { close(release) })
	if err := sub.Stop(ctxT(t, 5*time.Second)); err != nil {
		t.Fatal(err)
	}
	if st := sub.Stats(); st.Delivered != 11 || st.QueuedBytes != 0 {
		t.Errorf("after stop %+v, want 11 delivered, 0 bytes queued", st)
	}
}

// TestCoreAcrossServerRestart: a core subscription resumes by itself after
// the server comes back on the same port (messages published while it was
// down are gone: core NATS is at most once).
func TestCoreAcrossServerRestart(t *testing.T) {
	checkNoLeak(t)
	opts := natstest.JetStreamOptions(t)
	s1 := natstest.Run(t, opts)
	ev := newEventRecorder()
	c, err := Connect(ctxT(t, 5*time.Second), Options{
		URLs: []string{s1.ClientURL()}, ReconnectWait: 20 * time.Millisecond, MaxReconnectWait: 100 * time.Millisecond, OnEvent: ev.on,
	}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer drainConn(t, c)
	got := make(chan string, 16)
	sub, err := c.SubscribeCore(ctxT(t, 5*time.Second), CoreConfig{Subjects: []string{"live.>"}}, func(m Msg) error {
		got <- string(m.Data)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	defer sub.Stop(ctxT(t, 5*time.Second))
	s1.Shutdown()
	s1.WaitForShutdown()
	ev.wait(t, EventDisconnected, time.Minute)
	s2 := natstest.Restart(t, s1, opts)
	ev.wait(t, EventReconnected, time.Minute)
	pub, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{s2.ClientURL()}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer pub.Close()
	// The subscription is re-established on reconnect; flush the
	// subscriber's connection so the server has its interest before the
	// publish.
	if err := c.NATS().Flush(); err != nil {
		t.Fatal(err)
	}
	if err := pub.NATS().Publish("live.a", []byte("after")); err != nil {
		t.Fatal(err)
	}
	select {
	case m := <-got:
		if m != "after" {
			t.Errorf("got %q", m)
		}
	case <-time.After(time.Minute):
		t.Fatal("no message after the restart")
	}
}
