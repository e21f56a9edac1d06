package pipeline

import (
	"bytes"
	"strconv"
	"testing"
	"time"

	"modewatch/configs"
	"modewatch/stream"
)

// TestCheckpointCarriedReadings: a run stopped at a checkpoint and
// restarted with an aligner seeded from the checkpoint's carried readings
// (ModelUnit.Last) scores every later frame bit-identically to an
// uninterrupted run over the demo data with its timestamp jitter and
// dropouts, where frames right after the cut carry readings from before
// it. The reference is the uninterrupted run itself; a control restart
// without the seeds shows that the data needs them.
func TestCheckpointCarriedReadings(t *testing.T) {
	const period = 20 * time.Second
	data := demoBytes(t, 3)
	lines := bytes.SplitAfter(data, []byte("\n"))
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}}
	cfg.ApplyDefaults()
	ch, err := stream.NewChannels(nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	align := stream.Options{Align: stream.AlignConfig{Period: period}}
	type rec struct {
		at     time.Time
		t2, q  float64
		scored bool
	}
	record := func(dst map[string][]rec) func(u *Unit, at time.Time) {
		return func(u *Unit, at time.Time) {
			s := u.Score()
			dst[u.Name] = append(dst[u.Name], rec{at, s.T2, s.SPE, true})
		}
	}
	run := func(p *Pipeline, seed []LastReading, lines [][]byte) {
		t.Helper()
		in, err := stream.NewIntake(ch, align, p.Frame)
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range seed {
			if err := in.SeedLast(r.Channel, r.Value, r.Time); err != nil {
				t.Fatal(err)
			}
		}
		if _, err := in.Feed("demo", bytes.Join(lines, nil)); err != nil {
			t.Fatal(err)
		}
		if err := in.Flush(); err != nil {
			t.Fatal(err)
		}
	}
	whole := map[string][]rec{}
	pa, _ := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(whole)})
	run(pa, nil, lines)

	// First part: the first half of the lines, without the final flush
	// (a crash), then a checkpoint.
	cut := len(lines) / 2
	pb, _ := New(Options{Config: cfg, Channels: ch, Period: period})
	inB, _ := stream.NewIntake(ch, align, pb.Frame)
	if _, err := inB.Feed("demo", bytes.Join(lines[:cut], nil)); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	if _, err := pb.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	cks, errs := ReadCheckpoints(dir)
	if len(errs) > 0 || len(cks) != 4 {
		t.Fatalf("%d checkpoints: %v", len(cks), errs)
	}
	var seeds []LastReading
	var to time.Time
	for _, ck := range cks {
		if len(ck.Units[0].Last) == 0 {
			t.Errorf("unit %s: checkpoint without carried readings", ck.Units[0].Name)
		}
		seeds = append(seeds, ck.Units[0].Last...)
		if to.IsZero() || ck.To.Before(to) {
			to = ck.To
		}
	}
	// Redelivery: every reading not in a frame the checkpoint covers
	// (event time at or after the end of its last frame). Readings before
	// that and not yet delivered would have been late in the
	// uninterrupted run too.
	end := to.Add(period).UnixNano()
	var rest [][]byte
	for _, l := range lines {
		f := bytes.Fields(l)
		if len(f) == 0 {
			continue
		}
		ns, err := strconv.ParseInt(string(f[len(f)-1]), 10, 64)
		if err != nil {
			t.Fatalf("line %q: %v", l, err)
		}
		if ns >= end {
			rest = append(rest, l)
		}
	}

	restart := func(seed []LastReading) (map[string][]rec, int) {
		got := map[string][]rec{}
		pc, _ := New(Options{Config: cfg, Channels: ch, Period: period, OnScore: record(got)})
		if restored, errs := pc.Restore(cks); len(restored) != 4 || len(errs) > 0 {
			t.Fatalf("restored %v: %v", restored, errs)
		}
		run(pc, seed, rest)
		diff, n := 0, 0
		for unit, all := range whole {
			byT := map[time.Time]rec{}
			for _, r := range got[unit] {
				byT[r.at] = r
			}
			for _, w := range all {
				if !w.at.After(to) {
					continue
				}
				n++
				r := byT[w.at]
				if !r.scored || (r.t2 != w.t2 && !(r.t2 != r.t2 && w.t2 != w.t2)) || (r.q != w.q && !(r.q != r.q && w.q != w.q)) {
					diff++
				}
			}
		}
		if n == 0 {
			t.Fatal("no unit frame after the checkpoint")
		}
		return got, diff
	}
	if _, diff := restart(seeds); diff != 0 {
		t.Errorf("seeded restart: %d unit frames after the checkpoint differ from the uninterrupted run", diff)
	}
	if _, diff := restart(nil); diff == 0 {
		t.Error("control: a restart without seeds matches too, so this data does not test the carried readings")
	}
}
