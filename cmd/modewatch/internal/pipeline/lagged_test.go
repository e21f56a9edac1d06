package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/configs"
	"modewatch/stream"
)

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
