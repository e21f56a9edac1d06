package sink

import (
	"context"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"modewatch/stream/natsource/natstest"
)

// TestServerComesBack: the NATS server goes away while records keep
// coming; Submit does not block, the records wait in the spool, and when
// the server is back (same port, same JetStream store) every record
// reaches the stream once, in order.
func TestServerComesBack(t *testing.T) {
	opts := natstest.JetStreamOptions(t)
	srv := natstest.Run(t, opts)
	reconnected := make(chan struct{}, 1)
	nc, err := nats.Connect(srv.ClientURL(), nats.MaxReconnects(-1), nats.ReconnectWait(20*time.Millisecond),
		nats.ReconnectHandler(func(*nats.Conn) {
			select {
			case reconnected <- struct{}{}:
			default:
			}
		}))
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, _ := jetstream.New(nc)
	ctx := context.Background()
	if _, err := js.CreateStream(ctx, jetstream.StreamConfig{Name: "ALERTS", Subjects: []string{"mw.alerts.>"}, Duplicates: 2 * time.Minute}); err != nil {
		t.Fatal(err)
	}
	nd, _ := NewNATS(nc, NATSOptions{Subject: "mw.alerts.{unit}", JetStream: true})
	s, err := New(nd, Options{Name: "nats", SpoolDir: t.TempDir(), QueueLen: 2,
		Backoff: Backoff{Initial: 5 * time.Millisecond, Max: 50 * time.Millisecond}, AttemptTimeout: 200 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	ms := messages(t, records(t))
	half := len(ms) / 2
	for _, m := range ms[:half] {
		s.Submit(m)
	}
	waitFor(t, "first half", func() bool { return s.Stats().Delivered == uint64(half) })

	srv.Shutdown()
	srv.WaitForShutdown()
	for _, m := range ms[half:] {
		if err := s.Submit(m); err != nil {
			t.Fatal(err)
		}
	}
	waitFor(t, "failed attempts while down", func() bool { return s.Stats().Retries > 0 })
	if st := s.Stats(); st.Delivered != uint64(half) || st.Pending == 0 {
		t.Fatalf("while down: %+v", st)
	}

	natstest.Restart(t, srv, opts) // shut down by the test cleanup
	select {
	case <-reconnected:
	case <-time.After(time.Minute):
		t.Fatal("client did not reconnect")
	}
	waitFor(t, "the rest", func() bool { return s.Stats().Delivered >= uint64(len(ms)) })
	closeNow(t, s)
	got := streamMsgs(t, js, "ALERTS")
	if len(got) != len(ms) {
		t.Fatalf("stream holds %d, want %d", len(got), len(ms))
	}
	for i, m := range got {
		if m.Header.Get(nats.MsgIdHdr) != ms[i].ID {
			t.Fatalf("message %d: %q, want %q", i, m.Header.Get(nats.MsgIdHdr), ms[i].ID)
		}
	}
}
