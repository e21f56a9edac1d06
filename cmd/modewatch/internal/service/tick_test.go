package service

import (
	"context"
	"fmt"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/stream/natsource/natstest"
)

// TestStalledUnitShelfExpires: when a unit's readings stop, the service
// still advances its alarm timers from the wall clock (alerts.Engine.Tick):
// a shelf set on one of its alerts expires and the alert is annunciated
// again without any new frame. On the way, a channel that starts reporting
// late is counted as warming in /metrics and raises no quality alarm.
func TestStalledUnitShelfExpires(t *testing.T) {
	cfg := serviceConfig(t, `server: {embedded_port: -1}
http: {listen: "off"}`)
	svc, nc := startWithClient(t, Options{Config: cfg})

	// Readings (invented) of unit tk until a missing-channel alert opens.
	id, t0 := openMissingAlertAt(t, svc, nc)
	eng := svc.Pipeline().Alerts()
	// Wait until the last frame is scored: the readings end at t0 + 499 s,
	// and the frames of the last two seconds stay pending (the frame and
	// one period of lateness), so the last frame scored starts at
	// t0 + 497 s.
	last := t0.Add(497 * time.Second)
	natstest.WaitFor(t, hangBound, fmt.Sprintf("last frame of unit tk at %v", last), func() bool {
		return eng.LastFrame("tk").Equal(last)
	})
	frames, _, _ := svc.Pipeline().Frames()
	// The late channel c is counted as warming, not as a quality alarm.
	fams, err := svc.met.reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	warming := -1.0
	for _, f := range fams {
		if f.GetName() == "modewatch_unit_warming_channels" {
			for _, m := range f.Metric {
				if m.Label[0].GetValue() == "tk" {
					warming = m.GetGauge().GetValue()
				}
			}
		}
	}
	if warming != 1 {
		t.Errorf("modewatch_unit_warming_channels{unit=\"tk\"} = %v, want 1 (channel c)", warming)
	}
	for _, r := range eng.Open(nil) {
		if r.Quality != nil && r.Quality.Channel == "tk.x.c" {
			t.Errorf("quality alert for the warming channel: %s", r.ID)
		}
	}
	if rep := eng.Handle(context.Background(), alerts.Command{Op: alerts.OpShelve, AlertID: id, By: "test",
		Reason: "instrument work", For: alerts.Duration(time.Second)}); !rep.OK {
		t.Fatalf("shelve: %+v", rep)
	}
	shelved := func() bool {
		for _, r := range eng.Open(nil) {
			if r.ID == id {
				return r.Shelved != nil
			}
		}
		t.Fatalf("alert %s closed", id)
		return false
	}
	if !shelved() {
		t.Fatal("not shelved")
	}
	// No frame comes; the stall is noticed after 2 periods + lateness and
	// the shelf, 1 s of frame time, expires at the next tick.
	deadline := time.Now().Add(hangBound)
	for shelved() {
		if time.Now().After(deadline) {
			t.Fatal("shelf of a stalled unit did not expire")
		}
		time.Sleep(50 * time.Millisecond)
	}
	if n, _, _ := svc.Pipeline().Frames(); n != frames {
		t.Errorf("%d frames came meanwhile: the expiry was not the tick's", n-frames)
	}
	var found bool
	for _, r := range svc.Records() {
		if r.ID == id {
			found = r.Shelved == nil && r.Updated.After(last)
		}
	}
	if !found {
		t.Error("no record revision annunciating the alert after the shelf expired")
	}
}

func TestTickTiming(t *testing.T) {
	for _, c := range []struct{ period, lateness, every, stall time.Duration }{
		{time.Second, time.Second, time.Second, 3 * time.Second},
		{20 * time.Second, 20 * time.Second, 10 * time.Second, time.Minute},
		{100 * time.Millisecond, 0, time.Second, time.Second},
	} {
		if e, s := tickTiming(c.period, c.lateness); e != c.every || s != c.stall {
			t.Errorf("tickTiming(%v, %v) = %v, %v; want %v, %v", c.period, c.lateness, e, s, c.every, c.stall)
		}
	}
}
