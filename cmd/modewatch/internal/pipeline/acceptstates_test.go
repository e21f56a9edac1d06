package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
)

// TestAcceptanceWidensEveryState: a departure common to both operating
// states of the invented two-state plant of states_test.go (x1 reads 1.5
// higher, 5 σ of its noise, from frame 100 of the test day on: a sensor
// re-ranged, a setpoint moved) opens an incident in state 0, which the
// bounded hold (accept_after 1h) accepts as the new normal inside that
// state-0 period. The accept weight is 1: with four channels the default
// 0.2 leaves an accepted state near the limits (it lands within
// Mahalanobis distance 1/W = 5, see tracker.Widen). When the plant switches to state 1 (frame 1080) the
// departure is still there: with the acceptance taken into every state's
// model no incident opens in that state-1 period; with only the accepting
// state widened (the behaviour before), one does, which is what the
// first run's silence is compared against (behaviour test, no published
// figure).
func TestAcceptanceWidensEveryState(t *testing.T) {
	const (
		stepAt = sNormal + 100
		s1From = sNormal + 1080 // the first state-1 frame of the test day
		s1To   = sNormal + 2160
	)
	fitCfg := sConfig(t, "units: [{name: mix, state: ctl.a.mode, state_bands: [0.5]}]\n")
	m := sFit(t, fitCfg)
	at := func(k int) time.Time { return sStart.Add(time.Duration(k) * sPeriod) }
	data := stepX1(sPlant(sNormal, sNormal+3240, nil, nil, 2, 0, false), at(stepAt), 1.5)
	run := func(across bool) (accepted bool, inState1 int) {
		t.Helper()
		defer func(v bool) { acrossStates = v }(acrossStates)
		acrossStates = across
		cfg := sConfig(t, "units: [{name: mix, state: ctl.a.mode, state_bands: [0.5]}]\nalerts: {accept_after: 1h, accept_weight: 1}\n")
		last := map[string]*alerts.Record{}
		var sum [3]float64 // T², SPE, φ over their limits, frames 200–400 of the state-1 period
		var nsum int
		defer func() {
			t.Logf("across %v: mean ratio to the limit over state-1 frames: T² %.2f, SPE %.2f, φ %.2f",
				across, sum[0]/float64(nsum), sum[1]/float64(nsum), sum[2]/float64(nsum))
		}()
		_, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(data), Baseline: m,
			OnScore: func(u *Unit, ft time.Time) {
				k := int(ft.Sub(sStart) / sPeriod)
				if s := u.Score(); u.Name == "mix" && k >= s1From+200 && k < s1From+400 && s.Ready {
					sum[0] += s.T2 / s.T2Limit
					sum[1] += s.SPE / s.SPELimit
					sum[2] += s.Phi / s.PhiLimit
					nsum++
				}
			},
			Publisher: alerts.PublisherFunc(func(r *alerts.Record) {
				if r.Unit != "mix" || r.Kind != alerts.KindIncident || r.Group != alerts.GroupModel {
					return
				}
				c := *r
				last[r.ID] = &c
			})})
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range last {
			t.Logf("across %v: incident %s, start frame %d, end %v (%s)", across, r.ID, int(r.Start.Sub(sStart)/sPeriod)-sNormal, r.End, r.EndReason)
			if r.Start.Before(at(s1From)) && r.End != nil && r.End.Before(at(s1From)) && r.EndReason == alerts.EndNewNormal {
				accepted = true
			}
			if !r.Start.Before(at(s1From)) && r.Start.Before(at(s1To)) {
				inState1++
			}
		}
		return accepted, inState1
	}
	acc, n := run(true)
	if !acc {
		t.Fatal("the step opened no incident accepted as the new normal inside the first state-0 period: the test proves nothing")
	}
	if n != 0 {
		t.Errorf("acceptance taken into every state: %d incidents in the next state-1 period, want 0", n)
	}
	if acc, n := run(false); !acc || n == 0 {
		t.Errorf("acceptance in the accepting state only: accepted %v, %d incidents in the next state-1 period; want an incident there (the first run's silence is what the rule changes)", acc, n)
	}
}

// stepX1 adds d to every x1 reading of the mix unit at or after t0.
func stepX1(data []byte, t0 time.Time, d float64) []byte {
	var b bytes.Buffer
	for _, line := range strings.SplitAfter(string(data), "\n") {
		var x1, x2, x3, x4 float64
		var ts int64
		if n, _ := fmt.Sscanf(line, "mix,asset=a x1=%g,x2=%g,x3=%g,x4=%g %d", &x1, &x2, &x3, &x4, &ts); n == 5 && ts >= t0.UnixNano() {
			fmt.Fprintf(&b, "mix,asset=a x1=%.4f,x2=%.4f,x3=%.4f,x4=%.4f %d\n", x1+d, x2, x3, x4, ts)
			continue
		}
		b.WriteString(line)
	}
	return b.Bytes()
}
