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
	const period = 20 * time.Second
	ch, frames := collectFrames(t, demoBytes(t, 4), period)
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100, Lags: 1}}
	cfg.ApplyDefaults()
	type rec struct{ t2, spe, res float64 }
	record := func(dst map[string][]rec) func(u *Unit, _ time.Time) {
		return func(u *Unit, _ time.Time) {
			s := u.Score()
			dst[u.Name] = append(dst[u.Name], rec{s.T2, s.SPE, s.Residual})
		}
	}
	var contributors []string
	pub := alerts.PublisherFunc(func(r *alerts.Record) {
		for _, c := range r.Contributors {
			contributors = append(contributors, c.Channel)
		}
	})
	whole := map[string][]rec{}
	pa, err := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(whole), Publisher: pub})
	if err != nil {
		t.Fatal(err)
	}
	runFrames(t, pa, frames, nil)
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

	half := len(frames) / 2
	first := map[string][]rec{}
	pb, _ := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(first)})
	runFrames(t, pb, frames[:half], nil)
	dir := t.TempDir()
	if _, err := pb.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	resume := func(drop bool) string {
		cks, errs := ReadCheckpoints(dir)
		if len(errs) > 0 || len(cks) == 0 {
			t.Fatalf("read %d checkpoints: %v", len(cks), errs)
		}
		for _, ck := range cks {
			if len(ck.Units[0].Lagged) == 0 {
				t.Fatalf("unit %s: checkpoint without the previous frame", ck.Units[0].Name)
			}
			if drop {
				ck.Units[0].Lagged = nil
			}
		}
		second := map[string][]rec{}
		pc, _ := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(second)})
		if restored, errs := pc.Restore(cks); len(errs) > 0 || len(restored) != len(cks) {
			t.Fatalf("restored %v: %v", restored, errs)
		}
		runFrames(t, pc, frames[half:], nil)
		for unit, all := range whole {
			for k, r := range second[unit] {
				w := all[len(first[unit])+k]
				if math.Float64bits(r.t2) != math.Float64bits(w.t2) || math.Float64bits(r.spe) != math.Float64bits(w.spe) ||
					math.Float64bits(r.res) != math.Float64bits(w.res) {
					return fmt.Sprintf("unit %s frame %d after restore: %+v, uninterrupted %+v", unit, k, r, w)
				}
			}
		}
		return ""
	}
	if d := resume(false); d != "" {
		t.Fatal(d)
	}
	if resume(true) == "" {
		t.Error("dropping the previous frame from the checkpoint changed nothing: the test cannot see it")
	}

	// A frame allocates nothing with lagged copies.
	res, err := Replay(context.Background(), ReplayOptions{Config: cfg, Inputs: []string{"-"}, Stdin: bytes.NewReader(demoBytes(t, 2))})
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
		f.Start = f.Start.Add(period)
		if err := res.Pipeline.Frame(f); err != nil {
			t.Fatal(err)
		}
	}
	step()
	if a := testing.AllocsPerRun(100, step); a != 0 {
		t.Errorf("a frame with lagged copies allocates %v times", a)
	}
}
