// Package testkit holds the test helpers that more than one package of the
// modewatch command needs: the shipped demo scenario (invented data,
// deterministic) cut to its first hours, its readings as line protocol,
// and a buffer that concurrent writers and a reader may share.
//
// It is imported by tests only.
package testkit

import (
	"bytes"
	"sync"
	"testing"
	"time"

	"modewatch/sim"
)

// DemoScenario returns a copy of the shipped demo scenario cut to its
// first d of readings (sim.Scenario.Head: without its split when d ends
// within the normal days). A scenario that does not load ends the test.
func DemoScenario(tb testing.TB, d time.Duration) *sim.Scenario {
	tb.Helper()
	s, err := sim.Demo()
	if err != nil {
		tb.Fatal(err)
	}
	return s.Head(d)
}

// LineProtocol returns the readings of s as line protocol.
func LineProtocol(tb testing.TB, s *sim.Scenario) []byte {
	tb.Helper()
	var b bytes.Buffer
	if err := s.WriteLineProtocol(&b); err != nil {
		tb.Fatal(err)
	}
	return b.Bytes()
}

// DemoLog returns the readings of the demo scenario's first d as line
// protocol.
func DemoLog(tb testing.TB, d time.Duration) []byte {
	tb.Helper()
	return LineProtocol(tb, DemoScenario(tb, d))
}

// SyncBuffer is a bytes.Buffer that concurrent writers (a logger, a
// progress reporter) and a reader may share. The zero value is empty and
// ready to use.
type SyncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

// Write appends p.
func (s *SyncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

// Bytes returns a copy of what has been written so far.
func (s *SyncBuffer) Bytes() []byte {
	s.mu.Lock()
	defer s.mu.Unlock()
	return bytes.Clone(s.b.Bytes())
}

// String returns what has been written so far.
func (s *SyncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}
