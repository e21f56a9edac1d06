package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
)

// The data-quality profile tests run on a small invented plant (behaviour
// tests: no published reference exists for these rules; the figures
// checked are the rules' own design figures, alerts.StuckMargin and the
// staleness limit). Two units at a 10 s period:
//
//	press.line.speed   1500 rpm ± 5 while running, exactly 0 at rest
//	press.line.status  1 running, 0 stopped (integer status)
//	press.line.flow    live analog reading, 40 ± 1
//	press.line.temp    quantised to 0.5, slow swing with noise
//	feed.tank.level    live analog reading, with a dropout of 6 readings
//	                   every 997 frames
//	feed.tank.out
//
// The machine stops for 40 min every 6 h in the normal day.
const qPeriod = 10 * time.Second

var qStart = time.Date(2026, 5, 4, 0, 0, 0, 0, time.UTC)

// qEvents changes the plant at frame k (from the test log's start): rest
// forces the machine stopped, frozen holds flow at its value, and the
// silent units publish nothing.
type qEvents struct {
	rest   func(k int) bool
	frozen func(k int) bool
	silent func(k int, unit string) bool
	// spike, when set, is added to flow's reading of frame k (a one-frame
	// spike); drop, when true, leaves out level's reading of frame k.
	spike func(k int) float64
	drop  func(k int) bool
}

// qPlant writes frames [from, to) of the plant as line protocol.
func qPlant(from, to int, ev qEvents, seed uint64) []byte {
	rng := rand.New(rand.NewPCG(seed, 7))
	var b bytes.Buffer
	flow := 40.0
	for k := from; k < to; k++ {
		t := qStart.Add(time.Duration(k) * qPeriod).Add(time.Duration(rng.IntN(1000)) * time.Millisecond)
		ts := t.UnixNano()
		h := math.Mod(float64(k)*qPeriod.Hours(), 6)
		running := h >= 40.0/60
		if ev.rest != nil && ev.rest(k) {
			running = false
		}
		speed, status := 0.0, 0
		if running {
			speed, status = 1500+5*rng.NormFloat64(), 1
		}
		if ev.frozen == nil || !ev.frozen(k) {
			flow = 40 + rng.NormFloat64()
		}
		flowOut := flow
		if ev.spike != nil {
			flowOut += ev.spike(k)
		}
		temp := math.Round((60+3*math.Sin(float64(k)/500)+0.4*rng.NormFloat64())*2) / 2
		if ev.silent == nil || !ev.silent(k, "press") {
			fmt.Fprintf(&b, "press,asset=line speed=%.3f,status=%di,flow=%.4f,temp=%.1f,p2=%.4f %d\n",
				speed, status, flowOut, temp, 0.02*speed+rng.NormFloat64(), ts)
		}
		if ev.silent == nil || !ev.silent(k, "feed") {
			lvl := 5 + math.Sin(float64(k)/300) + 0.1*rng.NormFloat64()
			if k%997 >= 6 && (ev.drop == nil || !ev.drop(k)) { // dropouts of 6 readings: 3 frames past the staleness
				fmt.Fprintf(&b, "feed,asset=tank level=%.4f %d\n", lvl, ts)
			}
			fmt.Fprintf(&b, "feed,asset=tank out=%.4f %d\n", 2*lvl+0.2*rng.NormFloat64(), ts)
		}
	}
	return b.Bytes()
}

const qDay = 8640 // frames of 10 s in a day

// qFit fits the plant's normal day and returns the model file.
func qFit(t *testing.T, cfg *configs.Config) *ModelFile {
	t.Helper()
	return fitBytes(t, cfg, qPlant(0, qDay, qEvents{}, 1))
}

// fitBytes fits cfg on the line protocol of data and returns the model
// file.
func fitBytes(t testing.TB, cfg *configs.Config, data []byte) *ModelFile {
	t.Helper()
	return fitWith(t, ReplayOptions{Config: cfg}, data)
}

// fitWith is fitBytes with further replay options.
func fitWith(t testing.TB, opt ReplayOptions, data []byte) *ModelFile {
	t.Helper()
	opt.Inputs, opt.Stdin, opt.Fit = []string{"-"}, bytes.NewReader(data), true
	res, err := Replay(context.Background(), opt)
	if err != nil {
		t.Fatal(err)
	}
	m, err := res.Pipeline.Baseline()
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// qReplay replays data from model m and returns the records by ID (last
// revision).
func qReplay(t *testing.T, cfg *configs.Config, m *ModelFile, data []byte) map[string]alerts.Record {
	t.Helper()
	recs := map[string]alerts.Record{}
	_, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(data),
		Baseline: m, Publisher: alerts.PublisherFunc(func(r *alerts.Record) { recs[r.ID] = *r })})
	if err != nil {
		t.Fatal(err)
	}
	return recs
}

func qualityOf(recs map[string]alerts.Record, kind, channel string) []alerts.Record {
	var out []alerts.Record
	for _, r := range recs {
		if r.Quality != nil && r.Quality.Kind == kind && (channel == "" || r.Quality.Channel == channel) {
			out = append(out, r)
		}
	}
	slices.SortFunc(out, func(a, b alerts.Record) int { return a.Start.Compare(b.Start) })
	return out
}

func qConfig(t *testing.T) *configs.Config {
	t.Helper()
	cfg, err := configs.Parse("q.yaml", []byte("frames: {period: 10s}\n"))
	if err != nil {
		t.Fatal(err)
	}
	return cfg
}

// TestProfileLearned: fit learns, per channel, the flat runs, rest values,
// discreteness and missing runs the plant was generated with.
func TestProfileLearned(t *testing.T) {
	m := qFit(t, qConfig(t))
	if m.Version != ModelVersion {
		t.Fatalf("version %d", m.Version)
	}
	prof := map[string]alerts.ChannelProfile{}
	for _, u := range m.Units {
		for _, p := range u.Quality {
			prof[p.Channel] = p
		}
	}
	speed := prof["press.line.speed"]
	if !slices.Equal(speed.Rest, []float64{0}) || speed.Discrete() || speed.MaxFlat > 3 {
		t.Errorf("speed: rest %v, levels %d, max flat %d; want rest [0], not discrete, no live flat run", speed.Rest, speed.Levels, speed.MaxFlat)
	}
	if st := prof["press.line.status"]; st.Levels != 2 {
		t.Errorf("status: %d levels, want 2 (discrete)", st.Levels)
	}
	if tp := prof["press.line.temp"]; tp.Step != 0.5 || tp.Discrete() || tp.MaxFlat < 3 {
		t.Errorf("temp: step %v, levels %d, max flat %d; want a quantised live channel (step 0.5)", tp.Step, tp.Levels, tp.MaxFlat)
	}
	lvl := prof["feed.tank.level"]
	if r := lvl.MissingRate(); r < 0.002 || r > 0.005 || lvl.MaxGap < 3 || lvl.MaxGap > 4 {
		t.Errorf("level: missing rate %v, max gap %d; want 3 or 4 frames (jitter) in 997 past the staleness", r, lvl.MaxGap)
	}
	// A version 1 file (no profiles) still loads; a future version does not.
	var b bytes.Buffer
	m.Version, m.Units[0].Quality = 1, nil
	if err := encodeJSON(&b, m); err != nil {
		t.Fatal(err)
	}
	if _, err := DecodeModel(&b); err != nil {
		t.Errorf("version 1 model refused: %v", err)
	}
	m.Version = ModelVersion + 1
	b.Reset()
	_ = encodeJSON(&b, m)
	if _, err := DecodeModel(&b); err == nil {
		t.Error("a model file of a newer version was accepted")
	}
}

// TestQualityRulesReplay: after a fit on the normal day, a test day in
// which the machine rests four hours (longer than any normal stop), the
// status channel holds its value, flow freezes at a live value, the press
// unit's gateway is silent 30 min and then the whole input is silent
// 30 min (a clock jump of the aligner): no stuck alert from speed, status
// or the quantised temperature; flow stuck within StuckMargin+5 frames of
// its normal longest flat run; one silent alert per outage and unit,
// opened within 3 frame periods and closed by the return, and no missing
// alert standing in for it. Without profiles (a version 1 model) the
// machine at rest raises stuck alerts, as before.
func TestQualityRulesReplay(t *testing.T) {
	cfg := qConfig(t)
	m := qFit(t, cfg)
	var maxFlat int
	for _, u := range m.Units {
		for _, p := range u.Quality {
			if p.Channel == "press.line.flow" {
				maxFlat = p.MaxFlat
			}
		}
	}
	const (
		restFrom, restTo     = qDay + 600, qDay + 600 + 1440 // 4 h at rest
		freezeFrom, freezeTo = qDay + 3000, qDay + 3240      // flow frozen 40 min
		outFrom, outTo       = qDay + 4000, qDay + 4180      // press silent 30 min
		allFrom, allTo       = qDay + 6000, qDay + 6180      // everything silent 30 min
	)
	ev := qEvents{
		rest:   func(k int) bool { return k >= restFrom && k < restTo },
		frozen: func(k int) bool { return k >= freezeFrom && k < freezeTo },
		silent: func(k int, u string) bool {
			return (u == "press" && k >= outFrom && k < outTo) || (k >= allFrom && k < allTo)
		},
	}
	at := func(k int) time.Time { return qStart.Add(time.Duration(k) * qPeriod) }
	data := qPlant(qDay, 2*qDay, ev, 2)
	recs := qReplay(t, cfg, m, data)

	for _, ch := range []string{"press.line.speed", "press.line.status", "press.line.temp", "press.line.p2"} {
		if got := qualityOf(recs, alerts.QualityStuck, ch); len(got) > 0 {
			t.Errorf("%s: %d stuck alert(s), first at %v", ch, len(got), got[0].Start)
		}
	}
	stuck := qualityOf(recs, alerts.QualityStuck, "press.line.flow")
	if len(stuck) != 1 {
		t.Fatalf("flow frozen: %d stuck alerts, want 1", len(stuck))
	}
	late := stuck[0].Start.Sub(at(freezeFrom)) / qPeriod
	if late < time.Duration(maxFlat) || late > time.Duration(maxFlat+alerts.StuckMargin+5) {
		t.Errorf("flow stuck alert %d frames after the freeze, normal longest flat run %d: want within %d frames past it",
			late, maxFlat, alerts.StuckMargin+5)
	}
	if e := stuck[0].End; e == nil || e.Before(at(freezeTo)) || e.After(at(freezeTo+12)) {
		t.Errorf("flow stuck alert ended %v; the freeze ended %v", e, at(freezeTo))
	}

	silent := qualityOf(recs, alerts.QualitySilent, "")
	type want struct {
		unit     string
		from, to int
	}
	wants := []want{{"press", outFrom, outTo}, {"feed", allFrom, allTo}, {"press", allFrom, allTo}}
	if len(silent) != len(wants) {
		for _, r := range silent {
			t.Logf("silent %s %v – %v", r.Unit, r.Start, r.End)
		}
		t.Fatalf("%d silent alerts, want %d", len(silent), len(wants))
	}
	for _, w := range wants {
		i := slices.IndexFunc(silent, func(r alerts.Record) bool {
			return r.Unit == w.unit && r.Quality.Channel == w.unit && !r.Start.Before(at(w.from)) && r.Start.Before(at(w.to))
		})
		if i < 0 {
			t.Errorf("no silent alert of %s during its outage at %v", w.unit, at(w.from))
			continue
		}
		r := silent[i]
		if d := r.Start.Sub(at(w.from)); d > 3*qPeriod {
			t.Errorf("%s silent alert %v after the outage began; want within 3 periods", w.unit, d)
		}
		if r.End == nil || r.End.Before(at(w.to-1)) || r.End.After(at(w.to+2)) {
			t.Errorf("%s silent alert ended %v; the data returned at %v", w.unit, r.End, at(w.to))
		}
	}
	if ms := qualityOf(recs, alerts.QualityMissing, ""); len(ms) > 0 {
		t.Errorf("%d missing alerts (first %s at %v); the silent alert stands for an outage and dropouts are normal",
			len(ms), ms[0].Quality.Channel, ms[0].Start)
	}

	// The same day with a version 1 model: today's rules without profiles.
	for i := range m.Units {
		m.Units[i].Quality = nil
	}
	recs = qReplay(t, cfg, m, data)
	if len(qualityOf(recs, alerts.QualityStuck, "press.line.speed")) == 0 {
		t.Error("without profiles the machine at rest raised no stuck alert; the comparison shows nothing")
	}
}

func encodeJSON(w *bytes.Buffer, m *ModelFile) error { return json.NewEncoder(w).Encode(m) }

// TestProfileCheckpoint: a unit started from a fitted model carries its
// data-quality profiles on in its checkpoint, unchanged.
func TestProfileCheckpoint(t *testing.T) {
	cfg := qConfig(t)
	m := qFit(t, cfg)
	res, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"},
		Stdin: bytes.NewReader(qPlant(qDay, qDay+200, qEvents{}, 3)), Baseline: m})
	if err != nil {
		t.Fatal(err)
	}
	ck, err := res.Pipeline.CheckpointUnit("press")
	if err != nil {
		t.Fatal(err)
	}
	var want []alerts.ChannelProfile
	for _, u := range m.Units {
		if u.Name == "press" {
			want = u.Quality
		}
	}
	got := ck.Units[0].Quality
	if len(want) == 0 || fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("checkpoint profiles %+v, fitted %+v", got, want)
	}
}

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
