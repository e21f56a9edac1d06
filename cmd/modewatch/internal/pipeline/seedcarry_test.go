package pipeline

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/configs"
	"modewatch/stream"
)

// TestCheckpointSeedBeforeDiscovery: a restarted process starts with an
// empty channel registry, and the aligner gets a channel's carried reading
// only when that channel's first reading is decoded again. Here channel
// u.c is left out of the lines of the first frames after the checkpoint
// (a dropout), so the first frame after it is emitted before u.c is
// known again; the uninterrupted run carries u.c's last reading into that
// frame (within the staleness limit), and so must the restart: every
// frame after the checkpoint scores bit for bit as the uninterrupted run,
// with the same missing count. Invented data (4 correlated channels at
// 10 s, seeded); the reference is the uninterrupted run itself.
func TestCheckpointSeedBeforeDiscovery(t *testing.T) {
	const period = 10 * time.Second
	const n, last = 400, 300 // frames; the crash comes after line last
	rng := rand.New(rand.NewPCG(5, 12))
	start := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	var lines [][]byte
	for k := range n {
		z := rng.NormFloat64()
		ts := start.Add(time.Duration(k) * period).UnixNano()
		a, b, c, d := 10+z+0.3*rng.NormFloat64(), 20+2*z+0.3*rng.NormFloat64(), 5-z+0.3*rng.NormFloat64(), 7+0.5*rng.NormFloat64()
		// Frames last−1 … last+1 come after the checkpoint (which holds
		// frame last−2: the aligner waits one period past a frame's end):
		// u.c has no reading in them.
		if k >= last-1 && k <= last+1 {
			lines = append(lines, fmt.Appendf(nil, "u a=%.4f,b=%.4f,d=%.4f %d\n", a, b, d, ts))
		} else {
			lines = append(lines, fmt.Appendf(nil, "u a=%.4f,b=%.4f,c=%.4f,d=%.4f %d\n", a, b, c, d, ts))
		}
	}
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}}
	cfg.ApplyDefaults()
	type rec struct {
		t2, spe float64
		missing int
	}
	feed := func(ch *stream.Channels, p *Pipeline, seeds []LastReading, lines [][]byte, flush bool) {
		t.Helper()
		in, err := stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: period}}, p.Frame)
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range seeds {
			if err := in.SeedLast(r.Channel, r.Value, r.Time); err != nil {
				t.Fatal(err)
			}
		}
		if _, err := in.Feed("u", bytes.Join(lines, nil)); err != nil {
			t.Fatal(err)
		}
		if flush {
			if err := in.Flush(); err != nil {
				t.Fatal(err)
			}
		}
	}
	newRun := func(ch *stream.Channels, dst map[time.Time]rec) *Pipeline {
		p, err := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: func(u *Unit, at time.Time) {
			s := u.Score()
			dst[at] = rec{s.T2, s.SPE, len(s.Missing)}
		}})
		if err != nil {
			t.Fatal(err)
		}
		return p
	}
	registry := func() *stream.Channels {
		ch, err := stream.NewChannels(nil, 0)
		if err != nil {
			t.Fatal(err)
		}
		return ch
	}
	whole := map[time.Time]rec{}
	chA := registry()
	feed(chA, newRun(chA, whole), nil, lines, true)

	// The crash: lines up to last, no flush, then a checkpoint.
	chB := registry()
	pb := newRun(chB, map[time.Time]rec{})
	feed(chB, pb, nil, lines[:last+1], false)
	dir := t.TempDir()
	if _, err := pb.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	cks, errs := ReadCheckpoints(dir)
	if len(errs) > 0 || len(cks) != 1 {
		t.Fatalf("%d checkpoints: %v", len(cks), errs)
	}
	to := cks[0].To
	if want := start.Add((last - 2) * period); !to.Equal(want) {
		t.Fatalf("checkpoint holds frames to %v, want %v", to, want)
	}
	// The restart: a new registry, the carried readings seeded, and the
	// lines of every frame after the checkpoint delivered again.
	chC := registry()
	got := map[time.Time]rec{}
	pc := newRun(chC, got)
	if restored, errs := pc.Restore(cks); len(restored) != 1 || len(errs) > 0 {
		t.Fatalf("restored %v: %v", restored, errs)
	}
	feed(chC, pc, cks[0].Units[0].Last, lines[last-1:], true)

	first := to.Add(period)
	if w := whole[first]; w.missing != 0 {
		t.Fatalf("the uninterrupted run misses %d channels in the first frame after the checkpoint: the data tests nothing", w.missing)
	}
	compared := 0
	for at, w := range whole {
		if !at.After(to) {
			continue
		}
		compared++
		g, ok := got[at]
		same := func(x, y float64) bool { return math.Float64bits(x) == math.Float64bits(y) || (x != x && y != y) }
		if !ok || g.missing != w.missing || !same(g.t2, w.t2) || !same(g.spe, w.spe) {
			t.Errorf("frame %v after the restart: %+v (scored %v), uninterrupted %+v", at, g, ok, w)
		}
	}
	if compared < n-last {
		t.Errorf("%d frames compared after the checkpoint, want %d", compared, n-last)
	}
}
