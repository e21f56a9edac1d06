package natsource

import (
	"context"
	"fmt"
	"runtime"
	"strings"
	"testing"
	"time"

	"modewatch/stream/natsource/natstest"
)

// checkNoLeak records the goroutine count now and, at the end of the test
// (after later cleanups such as server shutdown), waits with a deadline for
// the count to come back. Call it first in a test.
func checkNoLeak(t *testing.T) {
	t.Helper()
	before := runtime.NumGoroutine()
	t.Cleanup(func() {
		deadline := time.Now().Add(time.Minute) // a hang bound
		for {
			n := runtime.NumGoroutine()
			if n <= before {
				return
			}
			if time.Now().After(deadline) {
				buf := make([]byte, 1<<20)
				buf = buf[:runtime.Stack(buf, true)]
				t.Errorf("goroutine leak: %d before, %d after\n%s", before, n, buf)
				return
			}
			time.Sleep(10 * time.Millisecond) // polling a condition under a deadline
		}
	})
}

// ctxT returns a context that ends with the test or after d.
func ctxT(t *testing.T, d time.Duration) context.Context {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), d)
	t.Cleanup(cancel)
	return ctx
}

// waitFor polls cond until it holds or the deadline passes.
func waitFor(t *testing.T, d time.Duration, what string, cond func() bool) {
	t.Helper()
	natstest.WaitFor(t, d, what, cond)
}

// eventRecorder collects connection events on a buffered channel.
type eventRecorder struct{ ch chan Event }

func newEventRecorder() *eventRecorder { return &eventRecorder{ch: make(chan Event, 1024)} }

func (r *eventRecorder) on(e Event) {
	select {
	case r.ch <- e:
	default:
	}
}

// wait returns the next event of kind k, failing the test after d.
func (r *eventRecorder) wait(t *testing.T, k EventKind, d time.Duration) Event {
	t.Helper()
	return receiveUntil(t, r.ch, d, func(e Event) bool { return e.Kind == k },
		func() string { return fmt.Sprintf("no %v event within %v", k, d) })
}

// receiveUntil takes values from ch until ok accepts one, which it
// returns; when none is accepted within d it fails the test with the
// message of fail.
func receiveUntil[T any](t *testing.T, ch <-chan T, d time.Duration, ok func(T) bool, fail func() string) T {
	t.Helper()
	timer := time.NewTimer(d)
	defer timer.Stop()
	for {
		select {
		case v := <-ch:
			if ok(v) {
				return v
			}
		case <-timer.C:
			t.Fatal(fail())
		}
	}
}

// connectLocal starts a server with JetStream for the test and returns a
// connection to it, drained when the test ends (before the server stops).
func connectLocal(t *testing.T) *Conn {
	t.Helper()
	s := natstest.StartJetStream(t)
	c, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{s.ClientURL()}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { drainConn(t, c) })
	return c
}

func drainConn(t *testing.T, c *Conn) {
	t.Helper()
	if err := c.Drain(ctxT(t, 10*time.Second)); err != nil {
		t.Errorf("drain: %v", err)
	}
}

func mustContain(t *testing.T, err error, parts ...string) {
	t.Helper()
	if err == nil {
		t.Fatalf("want an error containing %q, got nil", parts)
	}
	for _, p := range parts {
		if !strings.Contains(err.Error(), p) {
			t.Errorf("error %q does not mention %q", err, p)
		}
	}
}
