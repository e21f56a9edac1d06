package pipeline

import (
	"bytes"
	"context"
	"log/slog"
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
	in, err := stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: period}}, r.p.Frame)
	if err != nil {
		t.Fatal(err)
	}
	if err := in.Read(context.Background(), "late.lp", bytes.NewReader(data)); err != nil {
		t.Fatal(err)
	}
	if err := in.Flush(); err != nil {
		t.Fatal(err)
	}
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
