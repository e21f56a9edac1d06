package service

import (
	"context"
	"io"
	"net"
	"net/http"
	"sync"
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
	stop := make(chan struct{})
	var wg sync.WaitGroup
	served := 0
	wg.Go(func() {
		cl := &http.Client{Timeout: 2 * time.Second}
		for {
			select {
			case <-stop:
				return
			default:
			}
			for _, p := range []string{"/api/cluster", "/api/units", "/metrics"} {
				if resp, err := cl.Get("http://" + addr + p); err == nil {
					io.Copy(io.Discard, resp.Body)
					resp.Body.Close()
					served++
				}
			}
		}
	})
	svc, err := Start(ctx, Options{Config: cfg, Stdout: io.Discard})
	if err != nil {
		close(stop)
		wg.Wait()
		t.Fatal(err)
	}
	t.Cleanup(func() { svc.Shutdown(context.Background()) })
	// Let the poller see the started cluster too.
	for end := time.Now().Add(5 * time.Second); time.Now().Before(end); time.Sleep(20 * time.Millisecond) {
		if _, ok := svc.Cluster(); ok {
			break
		}
	}
	time.Sleep(200 * time.Millisecond)
	close(stop)
	wg.Wait()
	if served == 0 {
		t.Error("no request was served while the service started")
	}
}
