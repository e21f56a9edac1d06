package service

import (
	"context"
	"net/http"
	"net/http/httptest"
	"sync/atomic"
	"testing"
	"time"
)

// TestShutdownWithWebhookDown: while the webhook answers 503, a shutdown
// returns nil (exit 0) well within its timeout, because every undelivered
// record is in the spool, and says how many wait there; the next start
// delivers them. The timeout is two minutes, so that "well within" (half
// of it: the delivery's share, which a shutdown that waited on the webhook
// would use up) is far from what a shutdown takes on a loaded machine.
func TestShutdownWithWebhookDown(t *testing.T) {
	var attempts, delivered atomic.Int64
	var up atomic.Bool
	hook := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		attempts.Add(1)
		if !up.Load() {
			w.WriteHeader(http.StatusServiceUnavailable)
			return
		}
		delivered.Add(1)
	}))
	defer hook.Close()
	cfg := serviceConfig(t, `server: {embedded_port: -1}
http: {listen: "off"}
delivery: {webhook: `+hook.URL+`}
shutdown_timeout: 2m`)
	svc, err := Start(context.Background(), Options{Config: cfg})
	if err != nil {
		t.Fatal(err)
	}
	nc := natsClient(t, svc)
	openMissingAlert(t, svc, nc)
	deadline := time.Now().Add(hangBound)
	for attempts.Load() == 0 {
		if time.Now().After(deadline) {
			t.Fatal("the webhook was never tried")
		}
		time.Sleep(10 * time.Millisecond)
	}
	ctx, cancel := context.WithTimeout(context.Background(), cfg.ShutdownTimeout)
	defer cancel()
	start := time.Now()
	if err := svc.Shutdown(ctx); err != nil {
		t.Fatalf("shutdown with everything spooled: %v, want nil (exit 0)", err)
	}
	took := time.Since(start)
	waiting := svc.sinks.Waiting()
	if waiting == 0 {
		t.Fatal("no records waiting in the spool")
	}
	if took > cfg.ShutdownTimeout/2 {
		t.Errorf("shutdown took %v of its %v", took, cfg.ShutdownTimeout)
	}
	t.Logf("shutdown in %v, %d records waiting", took, waiting)

	// The next start delivers them.
	up.Store(true)
	svc2, err := Start(context.Background(), Options{Config: cfg})
	if err != nil {
		t.Fatal(err)
	}
	defer svc2.Shutdown(context.Background())
	deadline = time.Now().Add(hangBound)
	for delivered.Load() < int64(waiting) {
		if time.Now().After(deadline) {
			t.Fatalf("%d of %d spooled records delivered after the restart", delivered.Load(), waiting)
		}
		time.Sleep(10 * time.Millisecond)
	}
}
