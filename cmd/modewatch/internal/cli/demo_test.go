package cli

import (
	"strings"
	"testing"
)

// TestDemoRuns: the demo needs no configuration and no network (embedded
// server on a free loopback port, HTTP API on a free port if the default is
// taken), stops by itself with --duration, and says that it is advisory.
func TestDemoRuns(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the demo for a few seconds")
	}
	code, out, errs := runCLI(t, "", "demo", "--duration", "3s", "--speed", "20000", "--data-dir", t.TempDir())
	if code != ExitOK {
		t.Fatalf("exit %d\nstdout:\n%s\nstderr:\n%s", code, out, errs)
	}
	for _, want := range []string{
		"modewatch is advisory", "1. fitted 4 units", "2. service running with an embedded NATS server at nats://127.0.0.1:",
		"/api/units", "3. publishing", "plant time", "4. scored", "F1-header-bias",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("demo output lacks %q:\n%s", want, out)
		}
	}
}
