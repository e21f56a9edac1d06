package natstest

import (
	"context"
	"fmt"
	"net"
	"net/url"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// Cluster is a cluster of JetStream servers joined by routes on loopback.
type Cluster struct {
	Servers []*server.Server
}

// URLs returns the client URLs of the servers still running, comma
// separated (the form nats.Connect takes).
func (c *Cluster) URLs() string {
	var us []string
	for _, s := range c.Servers {
		us = append(us, s.ClientURL())
	}
	return strings.Join(us, ",")
}

// freePort returns a loopback port nobody listens on now.
func freePort(t testing.TB) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatalf("natstest: free port: %v", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// StartCluster runs n JetStream servers (n ≥ 3 for replicas 3) in one
// cluster, each with its store in a temporary directory, and waits until
// the cluster can create a stream with n replicas (bounded by ReadyTimeout
// per attempt, 60 s in all). The servers stop when the test ends. The
// route ports are found free before the servers start, so another process
// may take one in between: then the servers started are stopped and the
// cluster is started again on new ports (three attempts).
func StartCluster(t testing.TB, n int) *Cluster {
	t.Helper()
	c := &Cluster{}
	for attempt := 1; ; attempt++ {
		servers, err := startCluster(t, n)
		if err == nil {
			c.Servers = servers
			break
		}
		if attempt == 3 {
			t.Fatalf("natstest: cluster of %d: %v", n, err)
		}
		t.Logf("natstest: cluster of %d did not start (a port found free was taken meanwhile?); again on new ports: %v", n, err)
	}
	for _, s := range c.Servers {
		t.Cleanup(func() {
			s.Shutdown()
			s.WaitForShutdown()
		})
	}
	nc, err := nats.Connect(c.URLs())
	if err != nil {
		t.Fatalf("natstest: connect to the cluster: %v", err)
	}
	defer nc.Close()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(60 * time.Second)
	tick := time.NewTicker(100 * time.Millisecond)
	defer tick.Stop()
	for {
		ctx, cancel := context.WithTimeout(context.Background(), ReadyTimeout)
		_, err := js.CreateStream(ctx, jetstream.StreamConfig{Name: "natstest_ready", Subjects: []string{"natstest.ready"}, Replicas: n})
		if err == nil {
			err = js.DeleteStream(ctx, "natstest_ready")
		}
		cancel()
		if err == nil {
			return c
		}
		if time.Now().After(deadline) {
			t.Fatalf("natstest: cluster of %d not ready for JetStream: %v", n, err)
		}
		<-tick.C
	}
}

// startCluster starts n servers joined by routes on free loopback ports;
// if one does not start, it stops the others and returns why.
func startCluster(t testing.TB, n int) ([]*server.Server, error) {
	ports := make([]int, n)
	var routes []*url.URL
	for i := range ports {
		ports[i] = freePort(t)
		routes = append(routes, &url.URL{Scheme: "nats-route", Host: fmt.Sprintf("127.0.0.1:%d", ports[i])})
	}
	var servers []*server.Server
	for i := 0; i < n; i++ {
		o := JetStreamOptions(t)
		o.ServerName = fmt.Sprintf("s%d", i+1)
		o.Cluster = server.ClusterOpts{Name: "natstest", Host: "127.0.0.1", Port: ports[i]}
		o.Routes = routes
		s, err := start(o)
		if err != nil {
			for _, s := range servers {
				s.Shutdown()
				s.WaitForShutdown()
			}
			return nil, fmt.Errorf("server s%d (route port %d): %w", i+1, ports[i], err)
		}
		servers = append(servers, s)
	}
	return servers, nil
}
