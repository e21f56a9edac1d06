package pipeline

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/configs"
)

// gPlant writes frames [0, n) at 10 s of an invented machine unit m: a
// running flag (0/1, switching every 2 h), its speed (exactly 0 at rest)
// and a live flow that depends on it; with drain, also an integer valve
// flag that flips every 30 min and moves nothing to rest (a status, not a
// gate).
func gPlant(n int, drain bool) []byte {
	rng := rand.New(rand.NewPCG(21, 22))
	var b bytes.Buffer
	t0 := time.Date(2026, 7, 1, 0, 0, 0, 0, time.UTC)
	for k := 0; k < n; k++ {
		run := (k / 720) % 2
		speed := 0.0
		if run == 1 {
			speed = 1500 + 5*rng.NormFloat64()
		}
		flow := 20 + 30*float64(run) + math.Sin(float64(k)/90) + 0.3*rng.NormFloat64()
		fmt.Fprintf(&b, "m,asset=a running=%di,speed=%.3f,flow=%.4f", run, speed, flow)
		if drain {
			fmt.Fprintf(&b, ",valve=%di", (k/180)%2)
		}
		fmt.Fprintf(&b, " %d\n", t0.Add(time.Duration(k)*10*time.Second).UnixNano())
	}
	return b.Bytes()
}

// TestFitFindsStatusChannel: with no state configured, fit splits a unit
// by a status channel in one of whose values another channel rests (the
// running flag; the valve flag that moves nothing to rest is not chosen),
// and learns a hold-off; state: none keeps one model (behaviour test).
func TestFitFindsStatusChannel(t *testing.T) {
	fit := func(yaml string) *ModelFile {
		t.Helper()
		cfg, err := configs.Parse("g.yaml", []byte("frames: {period: 10s}\n"+yaml))
		if err != nil {
			t.Fatal(err)
		}
		m := fitBytes(t, cfg, gPlant(8640, true))
		if len(m.Units) != 1 {
			t.Fatalf("%d units", len(m.Units))
		}
		return m
	}
	m := fit("")
	sf := m.Units[0].States
	if sf == nil || sf.Channel != "m.a.running" || len(sf.Models) != 2 {
		t.Fatalf("states %+v, want two by m.a.running", sf)
	}
	for _, sm := range sf.Models {
		if sm.Frames < 4000 {
			t.Errorf("state %s: %d frames, want its 4320", sm.Label, sm.Frames)
		}
	}
	if m := fit("units: [{name: m, state: none}]\n"); m.Units[0].States != nil {
		t.Errorf("state: none: states %+v, want one model", m.Units[0].States)
	}
}

// TestGateScreen: fit keeps a unit's frames only while one of its channels
// can still be a status channel (integer values, at most four of them).
func TestGateScreen(t *testing.T) {
	nan := math.NaN()
	for _, tc := range []struct {
		name   string
		frames [][]float64
		want   bool
	}{
		{"a flag among live readings", [][]float64{{0, 1.5}, {1, 2.5}, {0, nan}}, true},
		{"live readings only", [][]float64{{0.5, 1.5}, {1.25, 2.5}}, false},
		{"integers of five levels", [][]float64{{0}, {1}, {2}, {3}, {4}}, false},
		{"integers of four levels, missing between", [][]float64{{0}, {1}, {nan}, {2}, {3}, {1}}, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var g gateScreen
			got := true
			for _, f := range tc.frames {
				miss := make([]bool, len(f))
				for i, v := range f {
					miss[i] = math.IsNaN(v)
				}
				got = g.screen(f, miss)
			}
			if got != tc.want {
				t.Errorf("screen: %v, want %v", got, tc.want)
			}
		})
	}
}
