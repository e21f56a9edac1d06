package pipeline

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// The quantised-channel tests run on an invented tank at a 1 min period
// (behaviour tests of model.resolution_floor and the stuck rule's tail;
// the figures checked are design figures: one step is not an alarm, ten
// steps are, a stuck live reading alerts within 20 frames of its normal
// longest flat run):
//
//	tank.line.in      analog flow, slow swing and noise
//	tank.line.out     analog flow following in
//	tank.line.temp    live analog reading, 40 ± 0.3
//	tank.line.press   nearly constant, quantised to 0.01: 2.00, one step
//	                  off in 2 % of frames (σ ≈ 0.0014: a step is 7 σ)
//	tank.line.valve   controller output quantised to 2 % (17 levels),
//	                  held at one step for tens of frames where the
//	                  swing turns
const tPeriod = time.Minute

var tStart = time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)

// tEvents changes the tank at frame k: press returns the pressure to
// publish (ok false: the normal one), hold keeps the valve at its value,
// freeze keeps temp at its value (the valve moves one step up as the hold
// starts, so that its flat run is the hold).
type tEvents struct {
	press        func(k int) (float64, bool)
	hold, freeze func(k int) bool
}

func tankPlant(from, to int, ev tEvents, seed uint64) []byte {
	rng := rand.New(rand.NewPCG(seed, 11))
	var b bytes.Buffer
	valve, temp := 0.0, 40.0
	for k := from; k < to; k++ {
		ts := tStart.Add(time.Duration(k) * tPeriod).Add(time.Duration(rng.IntN(500)) * time.Millisecond).UnixNano()
		in := 50 + 5*math.Sin(float64(k)/300) + 0.5*rng.NormFloat64()
		out := in + 0.5*rng.NormFloat64()
		press := 2.00
		if u := rng.Float64(); u < 0.02 {
			press += 0.01 * float64(2*int(u/0.01)-1) // one step down or up, 1 % each
		}
		if ev.press != nil {
			if v, ok := ev.press(k); ok {
				press = v
			}
		}
		v := 2 * math.Round((50+15*math.Sin(float64(k)/150)+0.3*rng.NormFloat64())/2)
		switch {
		case ev.hold == nil || !ev.hold(k):
			valve = v
		case !ev.hold(k - 1):
			valve += 2 // the controller moves one step and holds it
		}
		if ev.freeze == nil || !ev.freeze(k) {
			temp = 40 + 0.3*rng.NormFloat64()
		}
		fmt.Fprintf(&b, "tank,asset=line in=%.3f,out=%.3f,temp=%.3f,press=%.2f,valve=%g %d\n", in, out, temp, press, valve, ts)
	}
	return b.Bytes()
}

const tDay = 1440

func tankConfig(t *testing.T, extra string) *configs.Config {
	t.Helper()
	cfg, err := configs.Parse("tank.yaml", []byte("frames: {period: 1m}\n"+extra))
	if err != nil {
		t.Fatal(err)
	}
	return cfg
}

// modelAlertsLedBy returns the model records of recs that start in frames
// [from, to) with channel first among their contributors.
func modelAlertsLedBy(recs map[string]alerts.Record, channel string, from, to int) []alerts.Record {
	var out []alerts.Record
	for _, r := range recs {
		k := int(r.Start.Sub(tStart) / tPeriod)
		if r.Group == alerts.GroupModel && k >= from && k < to && len(r.Contributors) > 0 && r.Contributors[0].Channel == channel {
			out = append(out, r)
		}
	}
	return out
}

// TestResolutionFloorReplay: after a fit on three normal days, the nearly
// constant quantised pressure one step up for an hour opens no alert led
// by it with the default model.resolution_floor, and does without the
// floor (resolution_floor −1: the false alert the floor removes); ten
// steps up opens an alert led by it within a few frames either way.
func TestResolutionFloorReplay(t *testing.T) {
	const (
		oneFrom, oneTo = 3*tDay + 200, 3*tDay + 260
		tenFrom, tenTo = 3*tDay + 600, 3*tDay + 660
	)
	ev := tEvents{press: func(k int) (float64, bool) {
		switch {
		case k >= oneFrom && k < oneTo:
			return 2.01, true
		case k >= tenFrom && k < tenTo:
			return 2.10, true
		}
		return 0, false
	}}
	normal, test := tankPlant(0, 3*tDay, tEvents{}, 1), tankPlant(3*tDay, 4*tDay, ev, 2)
	for _, c := range []struct {
		name     string
		extra    string
		wantStep bool
	}{
		{"default floor", "", false},
		{"no floor", "model: {resolution_floor: -1}\n", true},
	} {
		t.Run(c.name, func(t *testing.T) {
			cfg := tankConfig(t, c.extra)
			m := fitBytes(t, cfg, normal)
			recs := qReplay(t, cfg, m, test)
			if got := modelAlertsLedBy(recs, "tank.line.press", oneFrom, oneTo); (len(got) > 0) != c.wantStep {
				t.Errorf("pressure one step up: %d alert(s) led by it, want any: %v", len(got), c.wantStep)
			}
			if got := modelAlertsLedBy(recs, "tank.line.press", tenFrom, tenFrom+10); len(got) == 0 {
				t.Errorf("pressure ten steps up: no alert led by it within 10 frames")
			}
		})
	}
}

// TestStuckQuantisedReplay: the quantised valve held by its controller
// longer than the old rule allowed (its normal longest flat run +
// alerts.StuckMargin + 3 frames) but within its learned tail raises no
// stuck alert, and the live temperature frozen at a live value does,
// within 20 frames of its normal longest flat run (issue target).
func TestStuckQuantisedReplay(t *testing.T) {
	cfg := tankConfig(t, "")
	m := fitBytes(t, cfg, tankPlant(0, 3*tDay, tEvents{}, 1))
	var valve, temp alerts.ChannelProfile
	for _, p := range m.Units[0].Quality {
		switch p.Channel {
		case "tank.line.valve":
			valve = p
		case "tank.line.temp":
			temp = p
		}
	}
	hold := valve.MaxFlat + alerts.StuckMargin + 3 // stuck under a fixed margin
	if valve.Discrete() || valve.MaxFlat < 20 {
		t.Fatalf("valve profile %+v: want a quantised live channel with long flat runs (test setup)", valve)
	}
	const holdFrom, freezeFrom, freezeTo = 3*tDay + 300, 3*tDay + 900, 3*tDay + 1000
	ev := tEvents{
		hold:   func(k int) bool { return k >= holdFrom && k < holdFrom+hold },
		freeze: func(k int) bool { return k >= freezeFrom && k < freezeTo },
	}
	recs := qReplay(t, cfg, m, tankPlant(3*tDay, 4*tDay, ev, 2))
	if got := qualityOf(recs, alerts.QualityStuck, "tank.line.valve"); len(got) > 0 {
		t.Errorf("valve held %d frames (normal longest %d, tail %.1f): stuck alert at %v", hold, valve.MaxFlat, valve.FlatTail, got[0].Start)
	}
	stuck := qualityOf(recs, alerts.QualityStuck, "tank.line.temp")
	if len(stuck) != 1 {
		t.Fatalf("temp frozen: %d stuck alerts, want 1", len(stuck))
	}
	late := int(stuck[0].Start.Sub(tStart.Add(freezeFrom*tPeriod)) / tPeriod)
	if late < temp.MaxFlat || late > temp.MaxFlat+20 {
		t.Errorf("temp stuck %d frames after the freeze, normal longest flat run %d: want within 20 frames past it", late, temp.MaxFlat)
	}
}

// TestProfileFlatTail: the profiler's tail scale is that of the live runs
// only: a channel with 12 live runs of 20..31 frames (a level, then the
// next step), one of 3 frames at the top of its range and long runs at
// its bottom (a rest value, 0) learns rest [0]
// and the tail of the live runs, by hand: the 10 longest (31..22) over the
// 11th (21) exceed it by 10+9+…+1 = 55, β̂ = 5.5 (alerts.FlatTailScale).
func TestProfileFlatTail(t *testing.T) {
	var pr profiler
	pr.grow([]string{"u.valve"})
	miss := []bool{false}
	v := 10.0
	feed := func(val float64, n int) {
		for range n {
			pr.add([]float64{val}, miss)
		}
	}
	for i := range 12 {
		feed(0, 200) // at rest
		v += 2
		feed(v, 20+i)
	}
	feed(40, 3) // the top of the range, briefly
	feed(0, 5)
	p := pr.profiles()[0]
	if len(p.Rest) != 1 || p.Rest[0] != 0 || p.MaxFlat != 31 || p.FlatTail != 5.5 {
		t.Errorf("profile %+v: want rest [0], max flat 31, flat tail 5.5", p)
	}
}
