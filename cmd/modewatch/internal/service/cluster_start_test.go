package service

import (
	"context"
	"errors"
	"io"
	"net"
	"net/http"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"modewatch/configs"
)

// TestClusterStartServesSafely: the HTTP API serves before the cluster part
// is started, so /api/cluster, /api/units and /metrics asked for while Start
// runs must read the cluster part safely (under -race this test fails if
// they read the plain field startCluster writes).
func TestClusterStartServesSafely(t *testing.T) {
	srv := readingsServer(t)
	ctx := context.Background()
	// The HTTP address must be known before Start (the poller asks it
	// while Start runs): a free port, taken again by the service. Another
	// process may take it in between; then Start fails and a new port is
	// tried.
	var (
		svc    *Service
		stop   chan struct{}
		wg     sync.WaitGroup
		served atomic.Int64 // whole rounds of the three paths answered
	)
	for attempt := 1; ; attempt++ {
		ln, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			t.Fatal(err)
		}
		addr := ln.Addr().String()
		ln.Close()
		cfg := &configs.Config{
			Server:             configs.Server{URLs: []string{srv.ClientURL()}},
			Intake:             configs.Intake{JetStream: configs.JetStream{Stream: "READINGS"}},
			Frames:             configs.Frames{Period: time.Second},
			HTTP:               configs.HTTP{Listen: addr},
			StateDir:           t.TempDir(),
			CheckpointInterval: time.Second,
			Cluster:            configs.Cluster{Instance: "a", Units: []string{"u1", "u2"}, LeaseTTL: 2 * time.Second},
		}
		cfg.ApplyDefaults()
		if err := cfg.Validate(); err != nil {
			t.Fatal(err)
		}
		stop = make(chan struct{})
		wg.Go(func() {
			cl := &http.Client{Timeout: 2 * time.Second}
			for {
				select {
				case <-stop:
					return
				default:
				}
				ok := true
				for _, p := range []string{"/api/cluster", "/api/units", "/metrics"} {
					resp, err := cl.Get("http://" + addr + p)
					if err != nil {
						ok = false
						continue
					}
					io.Copy(io.Discard, resp.Body)
					resp.Body.Close()
				}
				if ok {
					served.Add(1)
				}
			}
		})
		svc, err = Start(ctx, Options{Config: cfg, Stdout: io.Discard})
		if err == nil {
			break
		}
		close(stop)
		wg.Wait()
		if !errors.Is(err, syscall.EADDRINUSE) || attempt == 5 {
			t.Fatal(err)
		}
		t.Logf("port of %s taken meanwhile, another one: %v", addr, err)
	}
	t.Cleanup(func() { svc.Shutdown(context.Background()) })
	// Let the poller see the started cluster too: two whole rounds of
	// requests after the cluster part is up (the first may have begun
	// before).
	waitUntil(t, hangBound, "the cluster part started", func() bool { _, ok := svc.Cluster(); return ok })
	from := served.Load()
	waitUntil(t, hangBound, "two rounds of requests served after the cluster started", func() bool { return served.Load() >= from+2 })
	close(stop)
	wg.Wait()
}
