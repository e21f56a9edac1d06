package natsource

import (
	"strconv"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"modewatch/stream/natsource/natstest"
)

// TestJetStreamRecreate: the durable consumer deleted mid-stream is
// created again after the last message handled, and every message the
// stream held meanwhile is delivered once; the stream deleted too is
// created again, and the messages published after that are delivered.
// OnRecreate reports both, the second as a new stream.
func TestJetStreamRecreate(t *testing.T) {
	srv := natstest.StartJetStream(t)
	c, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{srv.ClientURL()}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { drainConn(t, c) })
	var mu sync.Mutex
	got := map[string]int{} // payload → deliveries
	var events []Recreated
	cons, err := c.ConsumeJetStream(ctxT(t, 10*time.Second), JetStreamConfig{
		Stream: "RD", Durable: "mw", CreateStream: true, StreamSubjects: []string{"rd.>"},
		Recreate: true, OnRecreate: func(ev Recreated) {
			mu.Lock()
			events = append(events, ev)
			mu.Unlock()
		},
	}, func(m Msg) error {
		mu.Lock()
		got[string(m.Data)]++
		mu.Unlock()
		return m.Ack()
	})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cons.Stop(ctxT(t, 5*time.Second)) })
	handled := func(n int) func() bool {
		return func() bool {
			mu.Lock()
			defer mu.Unlock()
			return len(got) >= n
		}
	}
	nc := c.NATS()
	publishN(t, nc, "rd.a", 1, 10)
	waitFor(t, time.Minute, "10 messages", handled(10))

	js, _ := jetstream.New(nc)
	if err := js.DeleteConsumer(ctxT(t, 5*time.Second), "RD", "mw"); err != nil {
		t.Fatal(err)
	}
	publishN(t, nc, "rd.a", 11, 30) // held by the stream while the consumer is gone
	waitFor(t, time.Minute, "30 messages after the consumer was recreated", handled(30))

	if err := js.DeleteStream(ctxT(t, 5*time.Second), "RD"); err != nil {
		t.Fatal(err)
	}
	waitFor(t, time.Minute, "the stream recreated", func() bool {
		mu.Lock()
		defer mu.Unlock()
		return len(events) == 2
	})
	publishN(t, nc, "rd.a", 31, 40)
	waitFor(t, time.Minute, "40 messages after the stream was recreated", handled(40))

	mu.Lock()
	defer mu.Unlock()
	for i := 1; i <= 40; i++ {
		if n := got[strconv.Itoa(i)]; n != 1 {
			t.Errorf("message %d delivered %d times", i, n)
		}
	}
	if events[0].StreamRecreated || events[0].AfterSeq != 10 || !events[1].StreamRecreated {
		t.Errorf("recreations %+v", events)
	}
	if st := cons.Stats(); st.Recreated != 2 {
		t.Errorf("Recreated = %d, want 2", st.Recreated)
	}
	if down, why := cons.Down(); down {
		t.Errorf("still down: %s", why)
	}
}
