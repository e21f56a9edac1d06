package sim

import (
	"bytes"
	"context"
	"errors"
	"math"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"modewatch/stream/natsource/natstest"
)

// natsConn starts a real NATS server in the test process and connects to it.
func natsConn(t *testing.T) *nats.Conn {
	t.Helper()
	return connect(t, natsServer(t))
}

// natsServer starts a real NATS server in the test process and returns its URL.
func natsServer(t *testing.T) string {
	t.Helper()
	return natstest.Start(t).ClientURL()
}

func connect(t *testing.T, url string) *nats.Conn {
	t.Helper()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	return nc
}

// TestLivePublishesTheSameLines publishes a short run as fast as possible and
// checks that each unit's subject carries exactly that unit's lines, in order,
// as the generator writes them to a file.
func TestLivePublishesTheSameLines(t *testing.T) {
	url := natsServer(t)
	nc, sub := connect(t, url), connect(t, url)
	s := shortDemo(t, 20*time.Minute)

	var mu sync.Mutex
	got := map[string]*bytes.Buffer{}
	count := 0
	done := make(chan struct{})
	want := s.Samples() * len(s.Units)
	_, err := sub.Subscribe("demo.readings.>", func(m *nats.Msg) {
		mu.Lock()
		defer mu.Unlock()
		if got[m.Subject] == nil {
			got[m.Subject] = &bytes.Buffer{}
		}
		got[m.Subject].Write(m.Data)
		if count++; count == want {
			close(done)
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	if err := sub.Flush(); err != nil {
		t.Fatal(err)
	}
	st, err := s.Live(context.Background(), nc, "demo", math.Inf(1))
	if err != nil {
		t.Fatal(err)
	}
	if st.Samples != s.Samples() || st.Messages != want {
		t.Fatalf("stats %+v, want %d samples and %d messages", st, s.Samples(), want)
	}
	select {
	case <-done:
	case <-time.After(time.Minute): // a hang bound
		mu.Lock()
		t.Fatalf("received %d of %d messages", count, want)
	}

	// Reference: the generator's lines per unit.
	g, _ := s.NewGenerator()
	ref := make([]bytes.Buffer, g.Units())
	var buf []byte
	for g.Step() {
		for u := range ref {
			buf, _ = g.AppendUnit(buf[:0], u)
			ref[u].Write(buf)
		}
	}
	mu.Lock()
	defer mu.Unlock()
	for u := range ref {
		subj := Subject("demo", g.UnitName(u))
		if got[subj] == nil || !bytes.Equal(got[subj].Bytes(), ref[u].Bytes()) {
			t.Errorf("%s: published lines differ from the generator's", subj)
		}
	}
	if len(got) != len(ref) {
		t.Errorf("messages on %d subjects, want %d", len(got), len(ref))
	}
}

// TestLivePacing: at a speed-up of 3000, twenty 1-minute samples are due over
// 19 min / 3000 = 380 ms of wall time, so Live cannot finish sooner; and it
// returns the context's error promptly when cancelled.
func TestLivePacing(t *testing.T) {
	nc := natsConn(t)
	s := shortDemo(t, 20*time.Minute)
	s.Period = time.Minute
	s.Jitter = 0
	start := time.Now()
	st, err := s.Live(context.Background(), nc, "", 3000)
	if err != nil {
		t.Fatal(err)
	}
	if el := time.Since(start); el < 380*time.Millisecond {
		t.Errorf("20 samples at speed 3000 took %v, want ≥ 380 ms", el)
	}
	if st.Samples != 20 {
		t.Errorf("%d samples, want 20", st.Samples)
	}

	// Real time: the second sample is due a minute later; cancel first.
	ctx, cancel := context.WithCancel(context.Background())
	res := make(chan error, 1)
	go func() {
		_, err := s.Live(ctx, nc, "x", 1)
		res <- err
	}()
	cancel()
	select {
	case err := <-res:
		if !errors.Is(err, context.Canceled) {
			t.Errorf("got %v, want context.Canceled", err)
		}
	case <-time.After(time.Minute): // a hang bound; it returns at once
		t.Fatal("Live did not return after cancel")
	}

	if _, err := s.Live(context.Background(), nc, "x", 0); err == nil {
		t.Error("speed 0 accepted")
	}
}

func TestSubject(t *testing.T) {
	if got := Subject("plant", "coolwater"); got != "plant.readings.coolwater" {
		t.Error(got)
	}
	if got := Subject("", "air"); got != "readings.air" {
		t.Error(got)
	}
}
