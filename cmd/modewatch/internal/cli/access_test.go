package cli

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
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
