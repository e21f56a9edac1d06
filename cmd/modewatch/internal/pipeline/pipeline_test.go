package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"slices"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/configs"
	"modewatch/stream"
)

// demoPeriod is the frame period the tests align the demo log to.
const demoPeriod = 20 * time.Second

// demoFrames returns the channels and aligned frames (demoPeriod) of the
// demo scenario's first d (invented data), and a configuration with model
// over the defaults.
func demoFrames(tb testing.TB, d time.Duration, model configs.Model) (*configs.Config, *stream.Channels, []stream.Frame) {
	tb.Helper()
	ch, frames := collectFrames(tb, testkit.DemoLog(tb, d), demoPeriod)
	cfg := &configs.Config{Model: model}
	cfg.ApplyDefaults()
	return cfg, ch, frames
}

func TestRoundPeriod(t *testing.T) {
	cases := []struct{ in, want time.Duration }{
		{19999803603, 20 * time.Second}, // the demo's jittered 20 s
		{15 * time.Second, 15 * time.Second},
		{1234567 * time.Microsecond, 1230 * time.Millisecond},
		{999 * time.Millisecond, 999 * time.Millisecond},
		{3, 3},
	}
	for _, c := range cases {
		if got := RoundPeriod(c.in); got != c.want {
			t.Errorf("RoundPeriod(%v) = %v, want %v", c.in, got, c.want)
		}
	}
}

// TestUnitsFromConfig: a configured unit takes the channels it lists; the
// rest go to their measurement's unit; channels outside the model are left
// out.
func TestUnitsFromConfig(t *testing.T) {
	cfg, err := configs.Parse("c.yaml", []byte(`
frames: {period: 20s}
model: {warmup: 50}
units:
  - name: pumps
    channels: [coolwater.pump01.flow, coolwater.pump02.flow]
`))
	if err != nil {
		t.Fatal(err)
	}
	res, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(testkit.DemoLog(t, time.Hour))})
	if err != nil {
		t.Fatal(err)
	}
	u := res.Pipeline.Unit("pumps")
	if u == nil {
		t.Fatal("unit pumps missing")
	}
	if got := u.Channels(); len(got) != 2 || got[0] != "coolwater.pump01.flow" {
		t.Errorf("pumps channels %v", got)
	}
	cw := res.Pipeline.Unit("coolwater")
	for _, c := range cw.Channels() {
		if c == "coolwater.pump01.flow" || c == "coolwater.pump02.flow" {
			t.Errorf("channel %s in two units", c)
		}
	}
	if n := len(res.Pipeline.Units()); n != 5 {
		t.Errorf("%d units, want the 4 measurements + pumps", n)
	}
}

// TestFrameAllocs guards the per-frame path (split by unit, tracker step,
// observation for the alarm engine) against allocation once the models
// exist, as the style guide asks of hot paths.
func TestFrameAllocs(t *testing.T) {
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100, RefreshEvery: 1 << 30}}
	cfg.ApplyDefaults()
	res, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(testkit.DemoLog(t, 2*time.Hour))})
	if err != nil {
		t.Fatal(err)
	}
	p := res.Pipeline
	// Frames of plausible values: each channel at its mean ± 0.1 σ,
	// alternating (a constant frame would soon count as flat-lined).
	n := res.Intake.Channels().Len()
	f := &stream.Frame{Values: make([]float64, n), Missing: make([]bool, n), Start: time.Date(2026, 3, 2, 3, 0, 0, 0, time.UTC)}
	lo, hi := make([]float64, n), make([]float64, n)
	for _, u := range p.Units() {
		if !u.Score().Ready {
			t.Fatalf("unit %s not ready after 2 h", u.Name)
		}
		means := make([]float64, u.Tracker().P())
		vars := make([]float64, u.Tracker().P())
		u.Tracker().Stats().MeanTo(means)
		u.Tracker().Stats().VarTo(vars)
		for k, i := range u.idx {
			lo[i], hi[i] = means[k]-0.1*math.Sqrt(vars[k]), means[k]+0.1*math.Sqrt(vars[k])
		}
	}
	odd := false
	step := func() {
		odd = !odd
		if odd {
			copy(f.Values, hi)
		} else {
			copy(f.Values, lo)
		}
		f.Start = f.Start.Add(20 * time.Second)
		if err := p.Frame(f); err != nil {
			t.Fatal(err)
		}
	}
	step()
	if a := testing.AllocsPerRun(200, step); a != 0 {
		t.Errorf("Frame allocates %v times per frame", a)
	}
	for _, u := range p.Units() {
		if math.IsNaN(u.Score().T2) {
			t.Errorf("unit %s: T² is NaN", u.Name)
		}
	}
}

// TestFreezeOnAlert: while an alert of a unit is active the alarm engine
// either (learn_around_alert: false) freezes its learning, and the unit
// reports the model state "frozen", or (the default) keeps it learning
// with the incident's channels learned as their reconstruction: the
// record says "reconstructing" and those channels are masked.
func TestFreezeOnAlert(t *testing.T) {
	for _, around := range []bool{false, true} {
		t.Run(fmt.Sprintf("learn_around_alert=%v", around), func(t *testing.T) { freezeOnAlert(t, around) })
	}
}

func freezeOnAlert(t *testing.T, around bool) {
	data := testkit.DemoLog(t, 3*time.Hour)
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}, Alerts: configs.Alerts{LearnAroundAlert: &around}}
	cfg.ApplyDefaults()
	var opened []*alerts.Record
	pub := alerts.PublisherFunc(func(r *alerts.Record) { opened = append(opened, r) })
	res, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(data), Publisher: pub})
	if err != nil {
		t.Fatal(err)
	}
	u := res.Pipeline.Unit("air")
	// Drive a gross fault: two air channels 50 standard deviations off.
	n := res.Intake.Channels().Len()
	f := &stream.Frame{Values: make([]float64, n), Missing: make([]bool, n)}
	_, _, last := res.Pipeline.Frames()
	means := make([]float64, u.Tracker().P())
	vars := make([]float64, u.Tracker().P())
	u.Tracker().Stats().MeanTo(means)
	u.Tracker().Stats().VarTo(vars)
	for i := range f.Missing {
		f.Missing[i] = true
	}
	for k, i := range u.idx {
		f.Missing[i] = false
		f.Values[i] = means[k]
		if k < 2 {
			f.Values[i] += 50 * math.Sqrt(vars[k]) * float64(1-2*(k%2))
		}
	}
	// 30 frames: a channel joins an open incident's location after leading
	// 10 frames (an incident may be open in air before the fault).
	for k := 1; k <= 30; k++ {
		f.Start = last.Add(time.Duration(k) * 20 * time.Second)
		if err := res.Pipeline.Frame(f); err != nil {
			t.Fatal(err)
		}
	}
	want := alerts.ModelFrozen
	if around {
		want = alerts.ModelAdapting
	}
	if s := u.ModelState(); s != want {
		t.Errorf("air model state %q after a gross fault, want %s", s, want)
	}
	if around {
		m := u.learnMask()
		if m == nil || !m[0] || !m[1] {
			t.Errorf("mask %v does not hold the faulty channels", m)
		}
		if s := opened[len(opened)-1].ModelState; s != alerts.ModelReconstructing {
			t.Errorf("record model state %q", s)
		}
		// The fault goes on: learning around it, scoring and the alarm
		// engine's attribution allocate nothing per frame.
		// (The readings wobble a little so no channel flat-lines.)
		k := 31
		base := slices.Clone(f.Values)
		if a := testing.AllocsPerRun(50, func() {
			f.Start = last.Add(time.Duration(k) * 20 * time.Second)
			for j, i := range u.idx {
				f.Values[i] = base[i] + 0.1*math.Sqrt(vars[j])*math.Sin(float64(k+j))
			}
			k++
			if err := res.Pipeline.Frame(f); err != nil {
				t.Fatal(err)
			}
		}); a != 0 {
			t.Errorf("a frame during an incident allocates %v times", a)
		}
	}
	found := false
	for _, r := range opened {
		if r.Unit == "air" && r.End == nil && r.Kind == alerts.KindIncident {
			found = true
		}
	}
	if !found {
		t.Error("no open incident for air")
	}
}
