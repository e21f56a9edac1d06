package service

import (
	"bytes"
	"fmt"
	"math"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"modewatch/alerts"
)

// openMissingAlert publishes 500 s of invented readings of unit tk (period
// 1 s) on modewatch.readings.tk: channel b stops after 100 s, so a
// "missing" quality alert opens after its 5-minute hold; channel c starts
// at 300 s and joins the model warming. It waits (10 s at most) for the
// alert and returns its id.
func openMissingAlert(t *testing.T, svc *Service, nc *nats.Conn) string {
	t.Helper()
	t0 := time.Now().Add(-time.Hour).Truncate(time.Second)
	var b bytes.Buffer
	for k := 0; k < 500; k++ {
		ts := t0.Add(time.Duration(k) * time.Second).UnixNano()
		a := 10 + math.Sin(float64(k)/7)
		switch {
		case k < 100:
			fmt.Fprintf(&b, "tk,asset=x a=%.4f,b=%.4f %d\n", a, 5+math.Cos(float64(k)/5), ts)
		case k < 300:
			fmt.Fprintf(&b, "tk,asset=x a=%.4f %d\n", a, ts)
		default: // channel c starts: it joins the model, warming
			fmt.Fprintf(&b, "tk,asset=x a=%.4f,c=%.4f %d\n", a, 1+math.Sin(float64(k)/3), ts)
		}
		if b.Len() > 32<<10 || k == 499 {
			if err := nc.Publish("modewatch.readings.tk", b.Bytes()); err != nil {
				t.Fatal(err)
			}
			b.Reset()
		}
	}
	nc.Flush()
	eng := svc.Pipeline().Alerts()
	deadline := time.Now().Add(10 * time.Second)
	for {
		for _, r := range eng.Open(nil) {
			if r.Quality != nil && r.Quality.Kind == alerts.QualityMissing && r.Quality.Channel == "tk.x.b" {
				return r.ID
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("no missing-channel alert; open: %+v", eng.Open(nil))
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// natsClient connects to the service's NATS server; closed at the end.
func natsClient(t *testing.T, svc *Service) *nats.Conn {
	t.Helper()
	nc, err := nats.Connect(svc.Info().NATS)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	return nc
}
