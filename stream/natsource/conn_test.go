package natsource

import (
	"errors"
	"fmt"
	"net"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"modewatch/stream/natsource/natstest"
)

func TestOptionsValidate(t *testing.T) {
	missing := filepath.Join(t.TempDir(), "missing")
	for _, tc := range []struct {
		name string
		o    Options
		want []string // every fragment must appear; nil means valid
	}{
		{"minimal", Options{URLs: []string{"nats://127.0.0.1:4222"}}, nil},
		{"no urls", Options{}, []string{"urls: at least one"}},
		{"empty url", Options{URLs: []string{"nats://a:1", " "}}, []string{"urls[1]: empty"}},
		{"password without user", Options{URLs: []string{"x"}, Password: "p"}, []string{"password given without user"}},
		{"two methods", Options{URLs: []string{"x"}, User: "u", Token: "t"}, []string{"only one of", "2 given"}},
		{"missing files", Options{URLs: []string{"x"}, CredentialsFile: missing, TLS: TLSOptions{CAFile: missing}},
			[]string{"credentials_file:", "tls.ca_file:"}},
		{"cert without key", Options{URLs: []string{"x"}, TLS: TLSOptions{CertFile: missing}},
			[]string{"cert_file and key_file must be given together"}},
		{"negative durations", Options{URLs: []string{"x"}, ReconnectWait: -time.Second}, []string{"reconnect_wait: negative"}},
		// Every problem is reported at once.
		{"all at once", Options{Password: "p", ReconnectWait: -1}, []string{"urls:", "password given", "reconnect_wait"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			err := tc.o.Validate()
			if tc.want == nil {
				if err != nil {
					t.Fatalf("unexpected error %v", err)
				}
				return
			}
			if !errors.Is(err, ErrConfig) {
				t.Fatalf("error %v does not wrap ErrConfig", err)
			}
			for _, w := range tc.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error %q lacks %q", err, w)
				}
			}
		})
	}
}

// TestBackoff checks the reconnect delay schedule against its definition
// (hand derivation from the Options doc comment, jitter off):
// delay(k) = min(wait·2^(k-1), maxWait).
func TestBackoff(t *testing.T) {
	const wait, maxWait = 500 * time.Millisecond, 30 * time.Second
	for _, tc := range []struct {
		k    int
		want time.Duration
	}{
		{1, 500 * time.Millisecond},
		{2, time.Second},
		{3, 2 * time.Second},
		{6, 16 * time.Second},
		{7, 30 * time.Second}, // 32 s capped
		{100, 30 * time.Second},
	} {
		if got := backoff(tc.k, wait, maxWait, 0); got != tc.want {
			t.Errorf("backoff(%d) = %v, want %v", tc.k, got, tc.want)
		}
	}
	// Jitter stays within [0, jitter).
	for range 1000 {
		d := backoff(2, wait, maxWait, 250*time.Millisecond)
		if d < time.Second || d >= time.Second+250*time.Millisecond {
			t.Fatalf("jittered delay %v outside [1s, 1.25s)", d)
		}
	}
}

func TestConnectRefused(t *testing.T) {
	checkNoLeak(t)
	// Port 1 on loopback: nothing listens (common practice for a refused port).
	_, err := Connect(ctxT(t, 5*time.Second), Options{URLs: []string{"nats://127.0.0.1:1"}}, nil)
	if err == nil || errors.Is(err, ErrAuth) {
		t.Fatalf("error %v, want a connection error that is not ErrAuth", err)
	}
	mustContain(t, err, "127.0.0.1:1")
}

func TestRedact(t *testing.T) {
	got := redact([]string{"nats://u:p@host:4222", "tls://host2:4443", "tok@h:1"})
	want := "nats://***@host:4222,tls://host2:4443,***@h:1"
	if got != want {
		t.Errorf("redact = %q, want %q", got, want)
	}
}

// TestRetryOnFailedConnect: the service may start before its server. With
// RetryOnFailedConnect, Connect returns at once in state connecting and the
// Connected event follows when the server comes up.
func TestRetryOnFailedConnect(t *testing.T) {
	checkNoLeak(t)
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	port := l.Addr().(*net.TCPAddr).Port
	l.Close() // free again; the server takes it below
	ev := newEventRecorder()
	c, err := Connect(ctxT(t, 5*time.Second), Options{
		URLs: []string{fmt.Sprintf("nats://127.0.0.1:%d", port)}, RetryOnFailedConnect: true,
		ReconnectWait: 10 * time.Millisecond, MaxReconnectWait: 50 * time.Millisecond, OnEvent: ev.on,
	}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer drainConn(t, c)
	if c.State() != StateConnecting {
		t.Errorf("state %v before the server is up, want connecting", c.State())
	}
	o := natstest.JetStreamOptions(t)
	o.Port = port
	natstest.Run(t, o)
	e := ev.wait(t, EventConnected, time.Minute)
	if c.State() != StateConnected || !strings.Contains(e.URL, fmt.Sprint(port)) {
		t.Errorf("state %v, event %+v", c.State(), e)
	}
}

// TestSeveralURLs: with the first server down, the client connects to the
// next one in the list.
func TestSeveralURLs(t *testing.T) {
	checkNoLeak(t)
	s := natstest.StartJetStream(t)
	c, err := Connect(ctxT(t, 5*time.Second), Options{
		URLs: []string{"nats://127.0.0.1:1", s.ClientURL()}, NoRandomize: true, Name: "failover-test",
	}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer drainConn(t, c)
	if st := c.Stats(); st.State != StateConnected || st.URL != s.ClientURL() {
		t.Errorf("stats %+v, want connected to %s", st, s.ClientURL())
	}
	// The name reaches the server's connection list (monitoring).
	cz, err := s.Connz(nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(cz.Conns) != 1 || cz.Conns[0].Name != "failover-test" {
		t.Errorf("server sees connections %+v", cz.Conns)
	}
}

// TestStateAndEventNames: the names metrics and logs show, and a value
// outside the constants saying what it is.
func TestStateAndEventNames(t *testing.T) {
	for s, want := range map[State]string{StateConnecting: "connecting", StateConnected: "connected",
		StateReconnecting: "reconnecting", StateClosed: "closed", State(9): "State(9)", State(-1): "State(-1)"} {
		if got := s.String(); got != want {
			t.Errorf("State(%d).String() = %q, want %q", int32(s), got, want)
		}
	}
	for k, want := range map[EventKind]string{EventConnected: "connected", EventDisconnected: "disconnected",
		EventReconnected: "reconnected", EventClosed: "closed", EventError: "error", EventKind(9): "EventKind(9)"} {
		if got := k.String(); got != want {
			t.Errorf("EventKind(%d).String() = %q, want %q", int(k), got, want)
		}
	}
}
