package service

import (
	"bytes"
	"fmt"
	"log/slog"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"modewatch/cmd/modewatch/internal/testkit"
)

// minServerVersion is the oldest NATS server release the service is
// tested against (TestExternalOldestServer).
const minServerVersion = "2.9"

// externalServer finds a nats-server binary: $MODEWATCH_NATS_SERVER, else
// nats-server on the PATH. It skips the test, saying how to get one, when
// there is none.
func externalServer(t *testing.T) (bin, version string) {
	t.Helper()
	bin = os.Getenv("MODEWATCH_NATS_SERVER")
	if bin == "" {
		var err error
		if bin, err = exec.LookPath("nats-server"); err != nil {
			t.Skipf("no external nats-server binary on this machine: set MODEWATCH_NATS_SERVER to one of release %s "+
				"(e.g. built with: go install github.com/nats-io/nats-server/v2@v2.9.25)", minServerVersion)
		}
	}
	out, err := exec.Command(bin, "--version").CombinedOutput()
	if err != nil {
		t.Fatalf("%s --version: %v: %s", bin, err, out)
	}
	m := regexp.MustCompile(`v?(\d+\.\d+\.\d+)`).FindSubmatch(out)
	if m == nil {
		t.Fatalf("%s --version: no version in %q", bin, out)
	}
	return bin, string(m[1])
}

// TestExternalOldestServer runs the service with JetStream intake against
// an external nats-server process of the oldest supported release (2.9,
// which has no consumer-reset API: the service must detect that and go
// on): the readings stream is created with its limits, readings published
// to it are scored, and /readyz answers ready.
func TestExternalOldestServer(t *testing.T) {
	bin, version := externalServer(t)
	t.Logf("external server %s, version %s", bin, version)
	// The server's port is found free before it starts, so another
	// process may take it in between: the server then exits, and is
	// started again on another port.
	dir := t.TempDir()
	var url string
	for attempt := 1; ; attempt++ {
		ln, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			t.Fatal(err)
		}
		port := ln.Addr().(*net.TCPAddr).Port
		ln.Close()
		logs := new(testkit.SyncBuffer)
		cmd := exec.Command(bin, "-a", "127.0.0.1", "-p", strconv.Itoa(port), "-js", "-sd", filepath.Join(dir, "js"))
		cmd.Stdout, cmd.Stderr = logs, logs
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		exited := make(chan struct{})
		go func() { cmd.Wait(); close(exited) }()
		t.Cleanup(func() { cmd.Process.Kill(); <-exited })
		url = fmt.Sprintf("nats://127.0.0.1:%d", port)
		up := false
		waitUntil(t, hangBound, "external server accepting connections or gone", func() bool {
			select {
			case <-exited:
				return true
			default:
			}
			nc, err := nats.Connect(url)
			if err == nil {
				nc.Close()
				up = true
			}
			return up
		})
		if up {
			break
		}
		if attempt == 3 {
			t.Fatalf("external server on port %d exited: %s", port, logs.Bytes())
		}
		t.Logf("external server on port %d exited (the port taken meanwhile?), another port: %s", port, logs.Bytes())
	}
	cfg := serviceConfig(t, `server: {urls: [`+url+`]}
intake: {jetstream: {stream: READINGS, max_age: 1h, max_bytes: 67108864}}
http: {listen: "127.0.0.1:0"}`)
	start := time.Now()
	var svcLog testkit.SyncBuffer
	svc := startService(t, Options{Config: cfg, Log: slog.New(slog.NewTextHandler(&svcLog, nil))})
	t.Logf("started in %v", time.Since(start))
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	id := openMissingAlert(t, svc, nc)
	t.Logf("alert %s from readings through nats-server %s", id, version)
	code, reason := readyz(t, svc)
	if code != 200 {
		t.Errorf("/readyz %d: %s", code, reason)
	}
	if old := regexp.MustCompile(`^2\.(9|10)\.`).MatchString(version); old && !bytes.Contains(svcLog.Bytes(), []byte("no consumer-reset API")) {
		t.Errorf("nats-server %s has no consumer-reset API, but the fallback was not logged", version)
	}
}
