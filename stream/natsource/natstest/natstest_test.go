package natstest

import (
	"context"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// TestRestartKeepsPortAndStore: a server restarted with Restart listens on
// the same client URL and still holds the JetStream message stored before.
func TestRestartKeepsPortAndStore(t *testing.T) {
	opts := JetStreamOptions(t)
	s1 := Run(t, opts)
	url := s1.ClientURL()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()

	js, err := jetstream.New(Connect(t, s1))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := js.CreateStream(ctx, jetstream.StreamConfig{Name: "T", Subjects: []string{"t.>"}, Storage: jetstream.FileStorage}); err != nil {
		t.Fatal(err)
	}
	if _, err := js.Publish(ctx, "t.a", []byte("kept")); err != nil {
		t.Fatal(err)
	}

	s2 := Restart(t, s1, opts)
	if s1.Running() {
		t.Error("old server still running after Restart")
	}
	if s2.ClientURL() != url {
		t.Errorf("restarted at %s, want %s", s2.ClientURL(), url)
	}
	js2, err := jetstream.New(Connect(t, s2))
	if err != nil {
		t.Fatal(err)
	}
	st, err := js2.Stream(ctx, "T")
	if err != nil {
		t.Fatal(err)
	}
	m, err := st.GetMsg(ctx, 1)
	if err != nil {
		t.Fatal(err)
	}
	if string(m.Data) != "kept" {
		t.Errorf("message after restart %q, want %q", m.Data, "kept")
	}
}

// TestStartIsCoreOnly: Start runs a server without JetStream.
func TestStartIsCoreOnly(t *testing.T) {
	s := Start(t)
	if s.JetStreamEnabled() {
		t.Error("Start enabled JetStream")
	}
	if !StartJetStream(t).JetStreamEnabled() {
		t.Error("StartJetStream did not enable JetStream")
	}
}
