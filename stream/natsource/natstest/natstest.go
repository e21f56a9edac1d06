// Package natstest starts real nats-server instances inside a test process,
// so that tests of every package talk to a genuine server on a loopback port
// rather than to a mock. Each server is shut down when the test ends.
// [CA] makes the certificates of TLS tests, for the server and for the
// service's HTTP API alike.
//
// It is test support only: production code starts its embedded server with
// natsource.StartEmbedded.
package natstest

import (
	"fmt"
	"net/url"
	"strconv"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
)

// ReadyTimeout bounds the wait for a started server to accept clients.
const ReadyTimeout = 10 * time.Second

// Options returns the options of a core NATS server on a random loopback
// port, without logging or signal handlers. Callers may change fields before
// passing them to Run.
func Options() *server.Options {
	return &server.Options{Host: "127.0.0.1", Port: -1, NoLog: true, NoSigs: true}
}

// JetStreamOptions returns Options with JetStream enabled and its store in a
// temporary directory of t.
func JetStreamOptions(t testing.TB) *server.Options {
	t.Helper()
	o := Options()
	o.JetStream = true
	o.StoreDir = t.TempDir()
	return o
}

// Run starts a server with opts, waits up to ReadyTimeout for it to accept
// clients and shuts it down (waiting for the shutdown to complete) when the
// test ends. It fails the test if the server cannot start.
func Run(t testing.TB, opts *server.Options) *server.Server {
	t.Helper()
	s, err := start(opts)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		s.Shutdown()
		s.WaitForShutdown()
	})
	return s
}

// start starts a server with opts and waits up to ReadyTimeout for it to
// accept clients (and routes, when it has a cluster port); a server that
// does not get there is shut down and its reason returned.
func start(opts *server.Options) (*server.Server, error) {
	s, err := server.NewServer(opts)
	if err != nil {
		return nil, fmt.Errorf("natstest: new server: %w", err)
	}
	go s.Start()
	if !s.ReadyForConnections(ReadyTimeout) {
		s.Shutdown()
		s.WaitForShutdown()
		return nil, fmt.Errorf("natstest: server not ready within %v", ReadyTimeout)
	}
	return s, nil
}

// Start runs a core NATS server (no JetStream) for the test.
func Start(t testing.TB) *server.Server {
	t.Helper()
	return Run(t, Options())
}

// StartJetStream runs a server with JetStream in a temporary store for the
// test.
func StartJetStream(t testing.TB) *server.Server {
	t.Helper()
	return Run(t, JetStreamOptions(t))
}

// Restart shuts old down if it is still running, waits for it to stop and
// runs a new server with a copy of opts on the port old listened on. With the
// same opts.StoreDir the JetStream data survives, as after a real server
// restart; clients with reconnects enabled find the new server at the same
// address.
func Restart(t testing.TB, old *server.Server, opts *server.Options) *server.Server {
	t.Helper()
	// ClientURL reads the resolved port from the server's options, so it
	// still answers after Shutdown (Addr does not).
	u, err := url.Parse(old.ClientURL())
	if err != nil {
		t.Fatalf("natstest: client URL of the old server: %v", err)
	}
	port, err := strconv.Atoi(u.Port())
	if err != nil {
		t.Fatalf("natstest: port of the old server %q: %v", u.Host, err)
	}
	old.Shutdown()
	old.WaitForShutdown()
	o := opts.Clone()
	o.Port = port
	return Run(t, o)
}

// Connect opens a client connection to s with the given nats options and
// closes it when the test ends.
func Connect(t testing.TB, s *server.Server, opts ...nats.Option) *nats.Conn {
	t.Helper()
	nc, err := nats.Connect(s.ClientURL(), opts...)
	if err != nil {
		t.Fatalf("natstest: connect to %s: %v", s.ClientURL(), err)
	}
	t.Cleanup(nc.Close)
	return nc
}

// WaitFor polls cond every 5 ms until it holds, failing the test with what
// if it does not within d: tests wait on a condition with a deadline,
// never on a fixed sleep.
func WaitFor(t testing.TB, d time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(d)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out after %v waiting for %s", d, what)
		}
		time.Sleep(5 * time.Millisecond) // polling a condition under a deadline
	}
}
