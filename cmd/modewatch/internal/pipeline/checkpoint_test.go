package pipeline

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
)

// collectFrames decodes data into copies of its aligned frames.
func collectFrames(t testing.TB, data []byte, period time.Duration) (*stream.Channels, []stream.Frame) {
	t.Helper()
	ch, err := stream.NewChannels(nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	var frames []stream.Frame
	in, err := stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: period}}, func(f *stream.Frame) error {
		frames = append(frames, stream.Frame{Start: f.Start, Segment: f.Segment,
			Values: append([]float64(nil), f.Values...), Missing: append([]bool(nil), f.Missing...)})
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if err := in.Read(context.Background(), "demo", bytes.NewReader(data)); err != nil {
		t.Fatal(err)
	}
	if err := in.Flush(); err != nil {
		t.Fatal(err)
	}
	return ch, frames
}

type scoreRec struct {
	t2, spe float64
	ready   bool
}

func runFrames(t *testing.T, p *Pipeline, frames []stream.Frame, got map[string][]scoreRec) {
	t.Helper()
	for i := range frames {
		if err := p.Frame(&frames[i]); err != nil {
			t.Fatal(err)
		}
	}
}

// TestCheckpointRestore: a run stopped after half the frames, checkpointed
// and restored gives bit-identical scores for the second half to an
// uninterrupted run, and frames fed again from before the checkpoint are
// not scored twice.
func TestCheckpointRestore(t *testing.T) {
	const period = 20 * time.Second
	data := demoBytes(t, 4)
	ch, frames := collectFrames(t, data, period)
	// Learning is frozen while alerts are active, so the alarm engine's
	// state must come back too for the scores to match.
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}}
	cfg.ApplyDefaults()
	if n := restartMatches(t, cfg, ch, period, frames, len(frames)/2, nil); n == 0 {
		t.Log("no alert revisions after the checkpoint in this stretch of data")
	}
}

// pubRec is what the restart tests compare of a published alert record.
type pubRec struct {
	id      string
	rev     int
	updated time.Time
	end     bool
}

// restartMatches runs frames through one pipeline, and again through a
// second one checkpointed after the first cut frames and a third restored
// from that checkpoint, fed again from 10 frames before the cut: the
// scores of every unit and the alert revisions published after the cut
// must be bit for bit the uninterrupted run's. Each record of the
// uninterrupted run also goes to seen (nil: none). It returns the number
// of revisions compared.
func restartMatches(t *testing.T, cfg *configs.Config, ch *stream.Channels, period time.Duration, frames []stream.Frame, cut int,
	seen func(*alerts.Record)) int {
	t.Helper()
	record := func(dst map[string][]scoreRec) func(u *Unit, _ time.Time) {
		return func(u *Unit, _ time.Time) {
			s := u.Score()
			dst[u.Name] = append(dst[u.Name], scoreRec{s.T2, s.SPE, s.Ready})
		}
	}
	publisher := func(dst *[]pubRec, also func(*alerts.Record)) alerts.Publisher {
		return alerts.PublisherFunc(func(r *alerts.Record) {
			*dst = append(*dst, pubRec{r.ID, r.Revision, r.Updated, r.End != nil})
			if also != nil {
				also(r)
			}
		})
	}
	var wholePubs, secondPubs []pubRec
	whole := map[string][]scoreRec{}
	pa, err := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(whole), Publisher: publisher(&wholePubs, seen)})
	if err != nil {
		t.Fatal(err)
	}
	runFrames(t, pa, frames, nil)

	first := map[string][]scoreRec{}
	pb, _ := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(first)})
	runFrames(t, pb, frames[:cut], nil)
	dir := t.TempDir()
	n, err := pb.WriteCheckpoints(dir)
	if err != nil || n != len(whole) {
		t.Fatalf("wrote %d checkpoints for %d units: %v", n, len(whole), err)
	}

	cks, errs := ReadCheckpoints(dir)
	if len(errs) > 0 || len(cks) != n {
		t.Fatalf("read %d checkpoints: %v", len(cks), errs)
	}
	second := map[string][]scoreRec{}
	pc, _ := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(second), Publisher: publisher(&secondPubs, nil)})
	restored, errs := pc.Restore(cks)
	if len(errs) > 0 || len(restored) != n {
		t.Fatalf("restored %v: %v", restored, errs)
	}
	// Redeliver 10 frames from before the checkpoint, then the rest.
	runFrames(t, pc, frames[cut-10:], nil)
	// The alert records published after the checkpoint are the same.
	boundary := frames[cut-1].Start
	var want []pubRec
	for _, p := range wholePubs {
		if p.updated.After(boundary) {
			want = append(want, p)
		}
	}
	if fmt.Sprint(want) != fmt.Sprint(secondPubs) {
		t.Errorf("alert revisions after restore:\n%v\nuninterrupted:\n%v", secondPubs, want)
	}
	for unit, all := range whole {
		if got, want := len(first[unit])+len(second[unit]), len(all); got != want {
			t.Errorf("unit %s: %d + %d frames scored, uninterrupted %d", unit, len(first[unit]), len(second[unit]), want)
			continue
		}
		for k, r := range second[unit] {
			w := all[len(first[unit])+k]
			if r != w && !(r.t2 != r.t2 && w.t2 != w.t2) {
				t.Fatalf("unit %s frame %d after restore: %+v, uninterrupted %+v", unit, k, r, w)
			}
		}
	}
	return len(want)
}

// TestCheckpointMismatch: a damaged checkpoint or one made under other
// settings is reported and its unit warms up again; nothing panics.
func TestCheckpointMismatch(t *testing.T) {
	const period = 20 * time.Second
	ch, frames := collectFrames(t, demoBytes(t, 2), period)
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}}
	cfg.ApplyDefaults()
	p, _ := New(Options{Config: cfg, Channels: ch, Period: period})
	runFrames(t, p, frames, nil)
	dir := t.TempDir()
	if _, err := p.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	// Damage one file, and make another claim a different unit.
	gdir, err := currentDir(dir)
	if err != nil || gdir == dir {
		t.Fatalf("current generation %q: %v", gdir, err)
	}
	air := CheckpointPath(gdir, "air")
	b, _ := os.ReadFile(air)
	os.WriteFile(air, b[:len(b)/2], 0o644)
	os.WriteFile(filepath.Join(gdir, "bogus"+checkpointSuffix), []byte(`{"format":"something else"}`), 0o644)
	cks, errs := ReadCheckpoints(dir)
	if len(cks) != 3 || len(errs) != 2 {
		t.Fatalf("%d usable checkpoints, errors %v", len(cks), errs)
	}
	for _, err := range errs {
		if !errors.Is(err, ErrModelFile) {
			t.Errorf("error %v does not wrap ErrModelFile", err)
		}
	}
	// Other model settings (alpha) than the checkpoints were made with.
	cfg2 := &configs.Config{Model: configs.Model{WarmUp: 100, Alpha: 0.001}}
	cfg2.ApplyDefaults()
	p3, _ := New(Options{Config: cfg2, Channels: ch, Period: period})
	if restored, rerrs := p3.Restore(cks); len(restored) != 0 || len(rerrs) != 3 {
		t.Errorf("settings mismatch: restored %v, errors %v", restored, rerrs)
	}
	// Another frame period than the checkpoints were made with.
	p2, _ := New(Options{Config: cfg, Channels: ch, Period: 10 * time.Second})
	restored, rerrs := p2.Restore(cks)
	if len(restored) != 0 || len(rerrs) != 3 {
		t.Errorf("period mismatch: restored %v, errors %v", restored, rerrs)
	}
}

// TestCheckpointGenerations: a later checkpoint replaces the earlier one
// as a whole; an interrupted write (a generation directory without CURRENT
// naming it) is ignored; unit files placed directly in the directory are
// read when there is no CURRENT.
func TestCheckpointGenerations(t *testing.T) {
	const period = 20 * time.Second
	ch, frames := collectFrames(t, demoBytes(t, 2), period)
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}}
	cfg.ApplyDefaults()
	p, _ := New(Options{Config: cfg, Channels: ch, Period: period})
	runFrames(t, p, frames[:200], nil)
	dir := t.TempDir()
	if _, err := p.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	runFrames(t, p, frames[200:], nil)
	if _, err := p.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	// An interrupted third generation: a directory with half a unit.
	os.Mkdir(filepath.Join(dir, "gen-99999999999999999999"), 0o755)
	os.WriteFile(filepath.Join(dir, "gen-99999999999999999999", "air"+checkpointSuffix), []byte("{"), 0o644)
	cks, errs := ReadCheckpoints(dir)
	if len(errs) > 0 || len(cks) != 4 {
		t.Fatalf("%d checkpoints, %v", len(cks), errs)
	}
	for _, ck := range cks {
		if !ck.To.Equal(frames[len(frames)-1].Start) {
			t.Errorf("unit %s checkpoint to %v, want the second generation (%v)", ck.Units[0].Name, ck.To, frames[len(frames)-1].Start)
		}
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 3 { // CURRENT, the second generation, the interrupted one
		t.Errorf("%d entries in the checkpoint directory", len(ents))
	}
	// A unit file moved in by hand, no CURRENT.
	moved := t.TempDir()
	gdir, _ := currentDir(dir)
	b, _ := os.ReadFile(CheckpointPath(gdir, "steam"))
	os.WriteFile(CheckpointPath(moved, "steam"), b, 0o644)
	if cks, errs := ReadCheckpoints(moved); len(cks) != 1 || len(errs) != 0 {
		t.Errorf("moved checkpoint: %d, %v", len(cks), errs)
	}
}
