package service

import (
	"context"
	"runtime"
	"testing"
	"time"
)

// TestShutdownLeavesNoGoroutines: Start and Shutdown of a service with an
// embedded server, HTTP API and checkpoint loop leave no goroutine behind,
// and Shutdown is idempotent.
func TestShutdownLeavesNoGoroutines(t *testing.T) {
	before := runtime.NumGoroutine()
	cfg := serviceConfigAt(t, t.TempDir(), 10*time.Second, `server: {embedded_port: -1}
http: {listen: "127.0.0.1:0"}`)
	svc, err := Start(context.Background(), Options{Config: cfg})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), hangBound)
	defer cancel()
	if err := svc.Shutdown(ctx); err != nil {
		t.Fatal(err)
	}
	if err := svc.Shutdown(ctx); err != nil {
		t.Errorf("second Shutdown: %v", err)
	}
	deadline := time.Now().Add(hangBound)
	for runtime.NumGoroutine() > before {
		if time.Now().After(deadline) {
			buf := make([]byte, 1<<16)
			n := runtime.Stack(buf, true)
			t.Fatalf("%d goroutines after shutdown, %d before:\n%s", runtime.NumGoroutine(), before, buf[:n])
		}
		time.Sleep(20 * time.Millisecond)
	}
}
