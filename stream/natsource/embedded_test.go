package natsource

import (
	"bytes"
	"context"
	"errors"
	"log/slog"
	"net"
	"os"
	"strings"
	"testing"
	"time"
)

// TestEmbeddedJetStreamPersists: the embedded server stores JetStream data
// in StoreDir; after Shutdown (twice, idempotent) a new embedded server on
// the same directory still has the stream and its messages.
func TestEmbeddedJetStreamPersists(t *testing.T) {
	checkNoLeak(t)
	dir := t.TempDir()
	var logBuf bytes.Buffer
	log := slog.New(slog.NewTextHandler(&logBuf, &slog.HandlerOptions{Level: slog.LevelInfo}))
	e1, err := StartEmbedded(ctxT(t, 10*time.Second), EmbeddedConfig{Port: -1, StoreDir: dir}, log)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(e1.ClientURL(), "nats://127.0.0.1:") {
		t.Errorf("client URL %q not on loopback", e1.ClientURL())
	}
	c, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{e1.ClientURL()}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	got := make(chan Msg, 10)
	cons, err := c.ConsumeJetStream(ctxT(t, 10*time.Second), JetStreamConfig{
		Stream: "E", Durable: "d", CreateStream: true, StreamSubjects: []string{"e.>"},
	}, func(m Msg) error { got <- m; return m.Ack() })
	if err != nil {
		t.Fatal(err)
	}
	publishN(t, c.NATS(), "e.one", 1, 3)
	for range 3 {
		select {
		case <-got:
		case <-time.After(time.Minute):
			t.Fatal("message not consumed")
		}
	}
	if err := cons.Stop(ctxT(t, 5*time.Second)); err != nil {
		t.Fatal(err)
	}
	drainConn(t, c)
	e1.Shutdown()
	e1.Shutdown()
	if !strings.Contains(logBuf.String(), "component=nats-server") {
		t.Errorf("server log not routed through slog:\n%s", logBuf.String())
	}
	if entries, err := os.ReadDir(dir); err != nil || len(entries) == 0 {
		t.Fatalf("store dir empty after shutdown: %v %v", entries, err)
	}

	e2, err := StartEmbedded(ctxT(t, 10*time.Second), EmbeddedConfig{Port: -1, StoreDir: dir}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer e2.Shutdown()
	c2, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{e2.ClientURL()}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer drainConn(t, c2)
	cons2, err := c2.ConsumeJetStream(ctxT(t, 10*time.Second), JetStreamConfig{Stream: "E", Durable: "d", BindOnly: true, NoReset: true}, func(Msg) error { return nil })
	if err != nil {
		t.Fatal(err)
	}
	ci, err := cons2.Info(ctxT(t, 5*time.Second))
	if err != nil {
		t.Fatal(err)
	}
	if ci.AckFloor.Stream != 3 || ci.NumPending != 0 {
		t.Errorf("consumer after restart: ack floor %d, pending %d; want 3, 0", ci.AckFloor.Stream, ci.NumPending)
	}
	if err := cons2.Stop(ctxT(t, 5*time.Second)); err != nil {
		t.Fatal(err)
	}
}

func TestEmbeddedConfigErrors(t *testing.T) {
	ctx := ctxT(t, 10*time.Second)
	if _, err := StartEmbedded(ctx, EmbeddedConfig{Port: -1}, nil); !errors.Is(err, ErrConfig) {
		t.Errorf("no store dir: %v, want ErrConfig", err)
	}
	if _, err := StartEmbedded(ctx, EmbeddedConfig{Port: 70000, NoJetStream: true}, nil); !errors.Is(err, ErrConfig) {
		t.Errorf("bad port: %v, want ErrConfig", err)
	}
	// A port already taken: a clear error, not a hang.
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	port := l.Addr().(*net.TCPAddr).Port
	short, cancel := context.WithTimeout(ctx, 2*time.Second)
	defer cancel()
	if _, err := StartEmbedded(short, EmbeddedConfig{Port: port, NoJetStream: true}, nil); err == nil {
		t.Error("started on a port in use")
	}
}
