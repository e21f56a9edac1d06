package service

import (
	"bytes"
	"fmt"
	"math"
	"sync/atomic"
	"testing"
	"time"

	"modewatch/alerts"
)

// TestServiceSilentFromStart runs the live service with its embedded NATS
// server (invented data; behaviour test). Two units are known before any
// reading arrives: sv from the fitted model and cf from the
// configuration's units. Unit ot publishes live readings from start-up;
// sv and cf send nothing. Checked: sv and cf each raise one silent alert
// by the wall clock within the staleness limit plus two tick intervals of
// start-up (the silence starts at start-up: no frame of theirs is ever
// formed), ot none; when sv's gateway starts sending, its first data
// closes its alert, and no second one opens.
func TestServiceSilentFromStart(t *testing.T) {
	svc, nc, _, rng := qService(t, 5, 3000, `http: {listen: "off"}
units: [{name: cf, channels: [cf.g.level]}]`)
	started := time.Now()

	// Live readings: ot from the start, sv once svOn is set.
	var svOn atomic.Bool
	stop := make(chan struct{})
	done := make(chan struct{})
	go func() {
		defer close(done)
		tick := time.NewTicker(250 * time.Millisecond)
		defer tick.Stop()
		for k := 0; ; k++ {
			select {
			case <-stop:
				return
			case <-tick.C:
			}
			var b bytes.Buffer
			ts := time.Now().UnixNano()
			x := math.Sin(float64(k) / 50)
			fmt.Fprintf(&b, "ot,asset=n a=%.4f,b=%.4f %d\n", x+0.1*rng.NormFloat64(), 2*x+0.1*rng.NormFloat64(), ts)
			if svOn.Load() {
				fmt.Fprintf(&b, "sv,asset=m speed=%.3f,status=1i,flow=%.4f %d\n", 1500+5*rng.NormFloat64(), 40+rng.NormFloat64(), ts)
			}
			if err := nc.Publish("modewatch.readings.q", b.Bytes()); err != nil {
				t.Error(err)
				return
			}
		}
	}()
	t.Cleanup(func() {
		close(stop)
		<-done
	})

	silent := func(unit string) (ids map[string]alerts.Record) {
		ids = map[string]alerts.Record{}
		for _, r := range svc.Records() {
			if r.Unit == unit && r.Kind == alerts.KindIncident && r.Quality != nil && r.Quality.Kind == alerts.QualitySilent {
				ids[r.ID] = r
			}
		}
		return ids
	}
	// The bound: the staleness, then at most two tick intervals (1 s at
	// this period) and a second of slack. It is checked on the alert's
	// start, which the service stamps with the tick's time (the ticker's
	// scheduled time, however late its goroutine runs; or, once ot has
	// frames, ot's latest frame plus the wall time since, which is not
	// later), so neither this test's polling nor a loaded machine moves it.
	bound := svc.pl.Staleness() + 3*time.Second
	deadline := time.Now().Add(hangBound)
	seen := map[string]time.Duration{}
	for len(seen) < 2 {
		if time.Now().After(deadline) {
			t.Fatalf("after %v: silent alerts of sv and cf: %d, %d; records %+v", time.Since(started), len(silent("sv")), len(silent("cf")), svc.Records())
		}
		for _, u := range []string{"sv", "cf"} {
			if _, ok := seen[u]; !ok {
				for _, r := range silent(u) {
					seen[u] = r.Start.Sub(started)
				}
			}
		}
		time.Sleep(50 * time.Millisecond)
	}
	for u, d := range seen {
		t.Logf("unit %s: silent alert from %v after start-up", u, d)
		if d > bound {
			t.Errorf("unit %s: silent alert from %v after start-up, want within %v", u, d, bound)
		}
		if n := len(silent(u)); n != 1 {
			t.Errorf("unit %s: %d silent alerts, want 1", u, n)
		}
	}
	if n := len(silent("ot")); n != 0 {
		t.Errorf("unit ot, which sends, has %d silent alerts", n)
	}

	// sv's gateway starts sending: its first data closes the alert.
	svOn.Store(true)
	deadline = time.Now().Add(hangBound)
	for {
		ids := silent("sv")
		var open int
		for _, r := range ids {
			if r.End == nil {
				open++
			}
		}
		if open == 0 {
			if len(ids) != 1 {
				t.Errorf("unit sv: %d silent alerts after its data came, want the one", len(ids))
			}
			for _, r := range ids {
				if r.End.Before(r.Start) {
					t.Errorf("silent alert ends %v before its start %v", r.End, r.Start)
				}
			}
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("unit sv's silent alert still open %v after its data came: %+v", hangBound, ids)
		}
		time.Sleep(50 * time.Millisecond)
	}
	if n := len(silent("cf")); n != 1 {
		t.Errorf("unit cf, still silent: %d silent alerts, want 1", n)
	}
}

// TestServiceSilentNothingArrives: the service starts from a fitted model
// of units sv and ot and no reading arrives at all, so no frame is ever
// formed; each unit raises one silent alert by the wall clock within the
// staleness limit plus two tick intervals of start-up (invented data;
// behaviour test with the embedded NATS server).
func TestServiceSilentNothingArrives(t *testing.T) {
	svc, _, _, _ := qService(t, 7, 3000, `http: {listen: "off"}`)
	started := time.Now()
	// The bound is checked on the alerts' start, stamped with the tick's
	// scheduled time (no unit has a frame to stamp it otherwise), not on
	// when this test sees them: see TestServiceSilentFromStart.
	bound := svc.pl.Staleness() + 3*time.Second
	deadline := started.Add(hangBound)
	for {
		n := map[string]int{}
		var last time.Time
		for _, r := range svc.Records() {
			if r.Kind == alerts.KindIncident && r.Quality != nil && r.Quality.Kind == alerts.QualitySilent {
				n[r.Unit]++
				if r.Start.After(last) {
					last = r.Start
				}
			}
		}
		if n["sv"] > 0 && n["ot"] > 0 {
			t.Logf("silent alerts from %v after start-up", last.Sub(started))
			if d := last.Sub(started); d > bound {
				t.Errorf("silent alerts from %v after start-up, want within %v", d, bound)
			}
			if n["sv"] != 1 || n["ot"] != 1 || len(n) != 2 {
				t.Errorf("silent alerts per unit %v, want one of sv and one of ot", n)
			}
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("after %v: silent alerts per unit %v; records %+v", time.Since(started), n, svc.Records())
		}
		time.Sleep(50 * time.Millisecond)
	}
}
