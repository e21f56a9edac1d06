package service

import (
	"fmt"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"modewatch/alerts"
	"modewatch/stream/natsource/natstest"
)

// waitUntil polls cond every 20 ms until it holds, failing after d.
func waitUntil(t *testing.T, d time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(d)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("%s: not within %v", what, d)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// readyz returns the status code and body of /readyz.
func readyz(t *testing.T, svc *Service) (int, string) {
	t.Helper()
	var body map[string]any
	code := getJSON(t, svc.Info().HTTP+"/readyz", &body)
	reason, _ := body["reason"].(string)
	return code, reason
}

// TestJetStreamConsumerAndStreamDeleted: the readings consumer deleted on
// the embedded server mid-stream is recreated and every reading the stream
// held meanwhile is scored; the stream deleted too is recreated, and the
// readings after it are scored. The recreations are counted.
func TestJetStreamConsumerAndStreamDeleted(t *testing.T) {
	cfg := serviceConfig(t, `server: {embedded_port: -1}
intake: {jetstream: {stream: READINGS}}
http: {listen: "127.0.0.1:0"}`)
	svc, nc := startWithClient(t, Options{Config: cfg})
	js, _ := jetstream.New(nc)
	t0 := time.Now().Add(-time.Hour).Truncate(time.Second)
	publish := func(from, to int) {
		for k := from; k < to; k++ {
			line := fmt.Sprintf("rc,asset=x a=%d,b=%d %d\n", k%17, k%5, t0.Add(time.Duration(k)*time.Second).UnixNano())
			if _, err := js.Publish(t.Context(), "modewatch.readings.rc", []byte(line)); err != nil {
				t.Fatal(err)
			}
		}
	}
	framesUpTo := func(k int) func() bool {
		return func() bool {
			_, _, last := svc.Pipeline().Frames()
			return !last.Before(t0.Add(time.Duration(k) * time.Second))
		}
	}
	publish(0, 100)
	waitUntil(t, hangBound, "frames up to 95 s", framesUpTo(95))
	if err := js.DeleteConsumer(t.Context(), "READINGS", "modewatch"); err != nil {
		t.Fatal(err)
	}
	publish(100, 200) // held by the stream while the consumer is gone
	waitUntil(t, hangBound, "frames up to 195 s after the consumer was recreated", framesUpTo(195))
	n, _, _ := svc.Pipeline().Frames()
	if n < 195 {
		t.Errorf("%d frames for 200 s of readings: some the stream held were lost", n)
	}
	if err := js.DeleteStream(t.Context(), "READINGS"); err != nil {
		t.Fatal(err)
	}
	waitUntil(t, hangBound, "stream recreated", func() bool {
		_, err := js.Stream(t.Context(), "READINGS")
		return err == nil && svc.recreations.Load() == 2
	})
	publish(200, 300)
	waitUntil(t, hangBound, "frames up to 295 s after the stream was recreated", framesUpTo(295))
	waitUntil(t, hangBound, "ready again", func() bool { code, _ := readyz(t, svc); return code == http.StatusOK })
	gaps := 0
	for _, r := range svc.Records() {
		if r.Unit == "rc" && r.Quality != nil && r.Quality.Kind == alerts.QualityIntakeGap {
			gaps++
		}
	}
	if gaps == 0 {
		t.Error("no intake-gap quality alert of unit rc")
	}
	t.Logf("%d intake-gap alert(s) of unit rc", gaps)
}

// TestPasswordRotation: on a separately started in-process server, the
// service's password is rotated away (the server drops the connection
// and rejects every reconnect) and restored: /readyz answers 503 naming
// the rejected credentials meanwhile, the rejections are counted, and the
// service reconnects and is ready again once the password is back.
func TestPasswordRotation(t *testing.T) {
	opts := natstest.Options()
	opts.Users = []*server.User{{Username: "mw", Password: "first-secret"}}
	srv := natstest.Run(t, opts)
	cfg := serviceConfig(t, `server: {urls: [`+srv.ClientURL()+`], user: mw, password: first-secret}
http: {listen: "127.0.0.1:0"}`)
	svc := startService(t, Options{Config: cfg})
	waitUntil(t, hangBound, "ready", func() bool { code, _ := readyz(t, svc); return code == http.StatusOK })

	rotated := opts.Clone()
	rotated.Users = []*server.User{{Username: "mw", Password: "second-secret"}}
	if err := srv.ReloadOptions(rotated); err != nil {
		t.Fatal(err)
	}
	waitUntil(t, hangBound, "readyz 503 naming the rejected credentials", func() bool {
		code, reason := readyz(t, svc)
		return code == http.StatusServiceUnavailable && strings.Contains(reason, "rejected the credentials")
	})
	if n := svc.Conn().Stats().AuthRejects; n == 0 {
		t.Error("no credential rejection counted")
	}
	if err := srv.ReloadOptions(opts.Clone()); err != nil {
		t.Fatal(err)
	}
	waitUntil(t, hangBound, "ready again after the password was restored", func() bool {
		code, _ := readyz(t, svc)
		return code == http.StatusOK
	})
	// Readings flow again.
	nc, err := nats.Connect(srv.ClientURL(), nats.UserInfo("mw", "first-secret"))
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	id := openMissingAlert(t, svc, nc)
	if id == "" {
		t.Fatal("no alert after reconnecting")
	}
}

// TestStallExit: with the server gone for good, the service reports
// itself failed after intake.stall_exit (10 s here), so that run exits
// non-zero.
func TestStallExit(t *testing.T) {
	if testing.Short() {
		t.Skip("waits 10 s for the stall limit")
	}
	srv := natstest.Run(t, natstest.Options())
	cfg := serviceConfig(t, `server: {urls: [`+srv.ClientURL()+`]}
intake: {stall_exit: 10s}
http: {listen: "off"}`)
	svc := startService(t, Options{Config: cfg})
	start := time.Now()
	srv.Shutdown()
	select {
	case <-svc.Failed():
	case <-time.After(hangBound):
		t.Fatalf("the service did not give up within %v", hangBound)
	}
	took := time.Since(start)
	t.Logf("gave up after %v", took)
	if took < 10*time.Second {
		t.Errorf("gave up after %v, before the stall limit", took)
	}
	if err := svc.Err(); err == nil || !strings.Contains(err.Error(), "intake.stall_exit") {
		t.Errorf("Err() = %v", err)
	}
}
