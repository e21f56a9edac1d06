package service

import (
	"bytes"
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/pipeline"
)

// TestAPIUnitsStates: a model fitted with default settings on a log where
// machine sv stops 2 min in every 10 (speed exactly 0, status 0) holds two
// operating states by sv's status channel; the live /api/units view of the
// service shows, for sv, the state channel, the current state, the
// hold-off and each state with its own modes, exactly one of them current
// (invented data; behaviour test with the embedded NATS server).
func TestAPIUnitsStates(t *testing.T) {
	never := func(int) bool { return false }
	svc, nc, t0, rng := qService(t, 9, 6000, `http: {listen: "127.0.0.1:0", open_access: true}`)
	var b bytes.Buffer
	qLines(&b, t0, 6000, 6300, never, never, never, rng)
	if err := nc.Publish("modewatch.readings.q", b.Bytes()); err != nil {
		t.Fatal(err)
	}
	nc.Flush()
	deadline := time.Now().Add(hangBound)
	for {
		var units []pipeline.UnitView
		if code := getJSON(t, svc.Info().HTTP+"/api/units", &units); code != 200 {
			t.Fatalf("/api/units: %d", code)
		}
		var sv *pipeline.UnitView
		for i := range units {
			if units[i].Name == "sv" {
				sv = &units[i]
			}
		}
		if sv != nil && sv.Frames >= 250 {
			if sv.StateChannel != "sv.m.status" || sv.State == "" || len(sv.States) != 2 {
				t.Fatalf("sv: state channel %q, state %q, %d states; want sv.m.status, a current state, 2", sv.StateChannel, sv.State, len(sv.States))
			}
			current := 0
			for _, st := range sv.States {
				if !st.Fitted || len(st.Modes) == 0 || st.Frames == 0 {
					t.Errorf("state %s: fitted %v, %d modes, %d frames; want a fitted state with modes", st.Label, st.Fitted, len(st.Modes), st.Frames)
				}
				if st.Current {
					current++
					if st.Label != sv.State {
						t.Errorf("current state %s, unit says %s", st.Label, sv.State)
					}
				}
			}
			if current != 1 {
				t.Errorf("%d current states, want 1", current)
			}
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("unit sv not scored: %+v", sv)
		}
		time.Sleep(100 * time.Millisecond)
	}
}
