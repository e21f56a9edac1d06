package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"log/slog"
	"math"
	"regexp"
	"slices"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/configs"
	"modewatch/stream"
	"modewatch/tracker"
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
	// Learning around the alert also scores each frame beyond the open
	// incidents (alerts.beyond_incidents), which must not allocate either.
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}, Alerts: configs.Alerts{LearnAroundAlert: &around, BeyondIncidents: &around}}
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
		// The air unit's latest model record (a data-quality record of
		// another unit, silent since the injected frames, may come later).
		var rec *alerts.Record
		for _, r := range opened {
			if r.Unit == "air" && r.Quality == nil {
				rec = r
			}
		}
		if rec == nil || rec.ModelState != alerts.ModelReconstructing {
			t.Errorf("air's latest model record %+v, want model state %s", rec, alerts.ModelReconstructing)
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

// TestLaggedUnits: with model.lags 1 every unit's tracker sees twice its
// channels (each frame with the one before it, tracker.Lagged); some
// mode names a channel at lag 1 ("name[t-1]"); alert contributors name
// the channels themselves; a frame allocates nothing; and a run cut in
// the middle, checkpointed and restored scores the second half
// bit-identically, which it does not when the checkpoint's previous frame
// is dropped.
func TestLaggedUnits(t *testing.T) {
	cfg, ch, frames := demoFrames(t, 4*time.Hour, configs.Model{WarmUp: 100, Lags: 1})
	var contributors []string
	pub := alerts.PublisherFunc(func(r *alerts.Record) {
		for _, c := range r.Contributors {
			contributors = append(contributors, c.Channel)
		}
	})
	// Every frame's T², SPE and residual statistic, as exact bit patterns.
	record := func(u *Unit) string {
		s := u.Score()
		return fmt.Sprintf("%x %x %x", math.Float64bits(s.T2), math.Float64bits(s.SPE), math.Float64bits(s.Residual))
	}
	run := newCutRun(t, Options{Config: cfg, Channels: ch, Period: demoPeriod, Publisher: pub}, frames, record)
	pa := run.whole
	lagged := 0
	for _, u := range pa.Units() {
		if got, want := u.Tracker().P(), 2*len(u.Channels()); got != want {
			t.Errorf("unit %s: tracker of %d columns, want %d", u.Name, got, want)
		}
		for _, m := range u.modesView() {
			for _, c := range m.Channels {
				if strings.HasSuffix(c, "[t-1]") {
					lagged++
				}
			}
		}
	}
	if lagged == 0 {
		t.Error("no mode names a channel at lag 1")
	}
	for _, c := range contributors {
		if strings.Contains(c, "[t-") {
			t.Errorf("alert contributor %q names a lagged column, not a channel", c)
		}
	}
	if len(contributors) == 0 {
		t.Log("no alert in this stretch of data")
	}

	if d := run.resume(func(ck *ModelFile) {
		if len(ck.Units[0].Lagged) == 0 {
			t.Fatalf("unit %s: checkpoint without the previous frame", ck.Units[0].Name)
		}
	}); d != "" {
		t.Fatal(d)
	}
	if run.resume(func(ck *ModelFile) { ck.Units[0].Lagged = nil }) == "" {
		t.Error("dropping the previous frame from the checkpoint changed nothing: the test cannot see it")
	}

	// A frame allocates nothing with lagged copies.
	res, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(testkit.DemoLog(t, 2*time.Hour))})
	if err != nil {
		t.Fatal(err)
	}
	n := res.Intake.Channels().Len()
	f := &stream.Frame{Values: make([]float64, n), Missing: make([]bool, n), Start: time.Date(2026, 3, 2, 3, 0, 0, 0, time.UTC)}
	copy(f.Values, frames[len(frames)-1].Values[:min(n, len(frames[len(frames)-1].Values))])
	k := 0
	step := func() {
		k++
		for i := range f.Values {
			f.Values[i] *= 1 + 1e-4*math.Sin(float64(k+i))
		}
		f.Start = f.Start.Add(demoPeriod)
		if err := res.Pipeline.Frame(f); err != nil {
			t.Fatal(err)
		}
	}
	step()
	if a := testing.AllocsPerRun(100, step); a != 0 {
		t.Errorf("a frame with lagged copies allocates %v times", a)
	}
}

// lateChannelLog is the demo log in which the channel air.dryer.dp reports
// only from the given time on.
func lateChannelLog(t *testing.T, data []byte, from time.Time) []byte {
	t.Helper()
	field := regexp.MustCompile(`,dp=[^ ,]*`)
	var out bytes.Buffer
	n := 0
	for _, l := range bytes.SplitAfter(data, []byte("\n")) {
		if bytes.HasPrefix(l, []byte("air,asset=dryer ")) && lineTime(t, l).Before(from) {
			l2 := field.ReplaceAll(l, nil)
			if len(l2) == len(l) {
				t.Fatalf("no dp field in %q", l)
			}
			l, n = l2, n+1
		}
		out.Write(l)
	}
	if n == 0 {
		t.Fatal("no line changed")
	}
	return out.Bytes()
}

type lateRun struct {
	frames  int // frames of unit air scored
	ready   []bool
	warming []bool // the late channel listed as warming
	inModel []bool // the late channel in a mode's support
	pubs    []*alerts.Record
	joins   int // "new channel joins" log records
	p       *Pipeline
}

// runLate replays data through a pipeline, recording unit air.
func runLate(t *testing.T, data []byte, period time.Duration) *lateRun {
	t.Helper()
	const late = "air.dryer.dp"
	r := &lateRun{}
	var logs bytes.Buffer
	ch, err := stream.NewChannels(nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	// Learning goes on during alerts: a unit frozen by an alert learns
	// nothing, so a new channel could not warm up meanwhile, and the demo's
	// alerts would decide the outcome.
	freeze := false
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}, Alerts: configs.Alerts{FreezeOnAlert: &freeze}}
	cfg.ApplyDefaults()
	r.p, err = New(Options{Config: cfg, Channels: ch, Period: period,
		Log:       slog.New(slog.NewTextHandler(&logs, nil)),
		Publisher: alerts.PublisherFunc(func(a *alerts.Record) { r.pubs = append(r.pubs, a) }),
		OnScore: func(u *Unit, _ time.Time) {
			if u.Name != "air" {
				return
			}
			s := u.Score()
			k := slices.Index(u.names, late)
			r.frames++
			r.ready = append(r.ready, s.Ready)
			r.warming = append(r.warming, k >= 0 && slices.Contains(s.Warming, k))
			// In the model: scored, neither warming, excluded nor missing.
			r.inModel = append(r.inModel, k >= 0 && s.Ready && !slices.Contains(s.Warming, k) &&
				!slices.Contains(s.Excluded, k) && !slices.Contains(s.Missing, k))
		}})
	if err != nil {
		t.Fatal(err)
	}
	feedLog(t, ch, period, "late.lp", data, r.p.Frame)
	r.joins = strings.Count(logs.String(), `msg="new channel joins the unit's model"`)
	if strings.Contains(logs.String(), "not modelled") {
		t.Errorf("a channel was left out of the model:\n%s", logs.String())
	}
	return r
}

// TestLateChannel: a channel that starts reporting after the unit's model
// was built joins it (tracker.Grow keeps what was learned), warming up
// until it has the warm-up frames, without a quality alarm; it is logged
// once; during the unit's own warm-up the model is not restarted.
func TestLateChannel(t *testing.T) {
	const period = 20 * time.Second
	const warmUp = 100
	data := testkit.DemoLog(t, 4*time.Hour)
	_, frames := collectFrames(t, data, period)
	for _, tc := range []struct {
		name string
		from int // frame from which the channel reports
	}{
		{"during warm-up", 40},
		{"after warm-up", 300},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := runLate(t, lateChannelLog(t, data, frames[tc.from].Start), period)
			if r.joins != 1 {
				t.Errorf("the late channel was logged %d times, want once", r.joins)
			}
			// The unit scores from its own warm-up on, without a restart.
			first := slices.Index(r.ready, true)
			if first < 0 || first > warmUp {
				t.Fatalf("first ready frame %d, want by frame %d (model not rebuilt)", first, warmUp)
			}
			if k := slices.Index(r.ready[first:], false); k >= 0 {
				t.Errorf("frame %d: the unit stopped scoring after the channel joined", first+k)
			}
			// Warming from its first frame until it has WarmUp frames (and
			// the refresh that admits it), then in the model.
			joined := slices.Index(r.warming, true)
			if joined < tc.from-2 || joined > tc.from+2 {
				t.Errorf("channel warming from frame %d, want about %d", joined, tc.from)
			}
			inAt := slices.Index(r.inModel, true)
			if inAt < 0 {
				t.Fatal("the late channel never entered the model")
			}
			if inAt < joined+warmUp || inAt > joined+warmUp+2*tracker.DefaultRefreshEvery {
				t.Errorf("channel in the model from frame %d; it warmed up from %d (want after %d frames, within two refreshes)", inAt, joined, warmUp)
			}
			if k := slices.Index(r.warming[inAt:], true); k >= 0 {
				t.Errorf("frame %d: still warming after entering the model", inAt+k)
			}
			t.Logf("unit ready from frame %d; channel warming from frame %d, in the model from frame %d", first, joined, inAt)
			// The grown model's checkpoint restores (into New with the
			// grown width, as a restarted service builds it).
			dir := t.TempDir()
			if _, err := r.p.WriteCheckpoints(dir); err != nil {
				t.Fatal(err)
			}
			cks, errs := ReadCheckpoints(dir)
			p2, _ := New(Options{Config: r.p.cfg, Channels: r.p.ch, Period: period})
			restored, rerrs := p2.Restore(cks)
			if len(errs)+len(rerrs) > 0 || !slices.Contains(restored, "air") {
				t.Fatalf("checkpoint of the grown unit: restored %v, errors %v %v", restored, errs, rerrs)
			}
			if u := p2.Unit("air"); !slices.Contains(u.Channels(), "air.dryer.dp") || u.Tracker().P() != len(u.Channels()) {
				t.Errorf("restored unit air: channels %v, tracker width %d", u.Channels(), u.Tracker().P())
			}
			for _, a := range r.pubs {
				if a.Quality != nil && a.Quality.Channel == "air.dryer.dp" {
					t.Errorf("quality alert %s for the warming channel", a.ID)
				}
			}
		})
	}
}
