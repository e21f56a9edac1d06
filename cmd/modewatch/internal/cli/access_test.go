package cli

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"modewatch/stream/natsource/natstest"
)

// TestCheckAndRunRefuseOpenNetworkListen: check and run refuse an HTTP
// listen address reachable from the network without authentication
// (exit 2, the key's position named); a token made by "modewatch token"
// makes the same address acceptable.
func TestCheckAndRunRefuseOpenNetworkListen(t *testing.T) {
	dir := t.TempDir()
	cfg := filepath.Join(dir, "open.yaml")
	os.WriteFile(cfg, []byte("frames: {period: 1s}\nhttp:\n  listen: 0.0.0.0:7480\n"), 0o600)
	for _, cmd := range []string{"check", "run"} {
		code, out, errs := runCLI(t, "", cmd, "--config", cfg)
		if code != ExitUsage || !strings.Contains(out+errs, cfg+":3:") || !strings.Contains(out+errs, "no authentication") {
			t.Errorf("%s: exit %d, out %q, err %q", cmd, code, out, errs)
		}
	}
	code, out, _ := runCLI(t, "", "token", "--name", "shift-lead", "--role", "write")
	if code != ExitOK {
		t.Fatalf("token: exit %d", code)
	}
	var entry string
	for _, l := range strings.Split(out, "\n") {
		if strings.Contains(l, "{name: shift-lead") {
			entry = strings.TrimSpace(l)
		}
	}
	if entry == "" {
		t.Fatalf("no tokens entry in %q", out)
	}
	os.WriteFile(cfg, []byte("frames: {period: 1s}\nhttp:\n  listen: 0.0.0.0:7480\n  tokens:\n    "+entry+"\n"), 0o600)
	if code, out, errs := runCLI(t, "", "check", "--config", cfg); code != ExitOK {
		t.Errorf("with a token: exit %d, %q %q", code, out, errs)
	}
}

// TestRunExitsWhenReadingsStall: run exits with status 1 once readings
// went unconsumed for intake.stall_exit (the server is gone), so that a
// supervisor restarts it.
func TestRunExitsWhenReadingsStall(t *testing.T) {
	if testing.Short() {
		t.Skip("waits 10 s for the stall limit")
	}
	srv := natstest.Run(t, natstest.Options())
	subs := srv.NumSubscriptions() // the server's own (system account, JetStream)
	cfg := filepath.Join(t.TempDir(), "stall.yaml")
	os.WriteFile(cfg, []byte("frames: {period: 1s}\nserver: {urls: ["+srv.ClientURL()+"]}\nintake: {stall_exit: 10s}\nhttp: {listen: \"off\"}\n"+
		"state_dir: "+filepath.Join(t.TempDir(), "data")+"\nshutdown_timeout: 2s\n"), 0o600)
	type result struct {
		code int
		errs string
	}
	done := make(chan result, 1)
	go func() {
		code, _, errs := runCLI(t, "", "run", "--config", cfg)
		done <- result{code, errs}
	}()
	// Once it runs and has subscribed to the readings, take the server
	// away (taken away between the connection and the subscription, the
	// subscription fails instead, a different exit).
	deadline := time.Now().Add(time.Minute)
	for srv.NumClients() == 0 || srv.NumSubscriptions() <= subs {
		if time.Now().After(deadline) {
			t.Fatal("run never connected")
		}
		time.Sleep(20 * time.Millisecond)
	}
	srv.Shutdown()
	select {
	case r := <-done:
		if r.code != ExitFailure || !strings.Contains(r.errs, "intake.stall_exit") {
			t.Errorf("exit %d, stderr %q", r.code, r.errs)
		}
	case <-time.After(40 * time.Second):
		t.Fatal("run did not exit within 40 s of the server's end")
	}
}
