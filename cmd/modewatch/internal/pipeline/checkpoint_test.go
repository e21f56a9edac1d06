package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/configs"
	"modewatch/stream"
)

// feedIntake feeds lines, as from source, through a new intake of the
// registry ch under opt into p, after seeding the intake with the carried
// readings seeds; with flush it flushes the aligner at the end (without,
// the run stops as a crash would). An error ends the test.
func feedIntake(t *testing.T, ch *stream.Channels, opt stream.Options, p *Pipeline, seeds []LastReading, source string, lines [][]byte, flush bool) {
	t.Helper()
	in, err := stream.NewIntake(ch, opt, p.Frame)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range seeds {
		if err := in.SeedLast(r.Channel, r.Value, r.Time); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := in.Feed(source, bytes.Join(lines, nil)); err != nil {
		t.Fatal(err)
	}
	if flush {
		if err := in.Flush(); err != nil {
			t.Fatal(err)
		}
	}
}

// collectFrames decodes data into copies of its aligned frames.
func collectFrames(t testing.TB, data []byte, period time.Duration) (*stream.Channels, []stream.Frame) {
	t.Helper()
	ch, err := stream.NewChannels(nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	var frames []stream.Frame
	feedLog(t, ch, period, "demo", data, func(f *stream.Frame) error {
		frames = append(frames, stream.Frame{Start: f.Start, Segment: f.Segment,
			Values: append([]float64(nil), f.Values...), Missing: append([]bool(nil), f.Missing...)})
		return nil
	})
	return ch, frames
}

// feedLog reads the line protocol data (named name in messages) through an
// intake of the channels ch aligned at period, handing every frame to
// emit, and flushes it.
func feedLog(t testing.TB, ch *stream.Channels, period time.Duration, name string, data []byte, emit func(*stream.Frame) error) {
	t.Helper()
	in, err := stream.NewIntake(ch, stream.Options{Align: stream.AlignConfig{Period: period}}, emit)
	if err != nil {
		t.Fatal(err)
	}
	if err := in.Read(context.Background(), name, bytes.NewReader(data)); err != nil {
		t.Fatal(err)
	}
	if err := in.Flush(); err != nil {
		t.Fatal(err)
	}
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

// cutRun is the restart check of a setting: the frames run through one
// pipeline uninterrupted (whole), and through another (cut) stopped after
// the first half and checkpointed to dir. record is what is compared of
// each unit's frame (exact bit patterns, as a string).
type cutRun struct {
	t      *testing.T
	opt    Options // of the uninterrupted run; the others have no Publisher
	frames []stream.Frame
	record func(*Unit) string
	half   int
	dir    string
	whole  *Pipeline
	cut    *Pipeline
	// each unit's records in the uninterrupted run and before the cut
	wholeRecs, firstRecs map[string][]string
}

// newCutRun runs both pipelines and writes the checkpoint.
func newCutRun(t *testing.T, opt Options, frames []stream.Frame, record func(*Unit) string) *cutRun {
	t.Helper()
	r := &cutRun{t: t, opt: opt, frames: frames, record: record, half: len(frames) / 2, dir: t.TempDir(),
		wholeRecs: map[string][]string{}, firstRecs: map[string][]string{}}
	r.whole = r.pipeline(r.wholeRecs, opt.Publisher)
	runFrames(t, r.whole, frames, nil)
	r.cut = r.pipeline(r.firstRecs, nil)
	runFrames(t, r.cut, frames[:r.half], nil)
	if _, err := r.cut.WriteCheckpoints(r.dir); err != nil {
		t.Fatal(err)
	}
	return r
}

// pipeline returns a pipeline of r's options with pub as its publisher,
// recording every unit's frame into dst.
func (r *cutRun) pipeline(dst map[string][]string, pub alerts.Publisher) *Pipeline {
	r.t.Helper()
	opt := r.opt
	opt.Publisher = pub
	opt.OnScore = func(u *Unit, _ time.Time) { dst[u.Name] = append(dst[u.Name], r.record(u)) }
	p, err := New(opt)
	if err != nil {
		r.t.Fatal(err)
	}
	return p
}

// resume restores the checkpoint, each unit's file passed through edit
// first (nil: as written), into a new pipeline and runs the frames after
// the cut. It returns where the records first differ from the
// uninterrupted run's, "" when they agree frame for frame.
func (r *cutRun) resume(edit func(*ModelFile)) string {
	t := r.t
	t.Helper()
	cks, errs := ReadCheckpoints(r.dir)
	if len(errs) > 0 || len(cks) == 0 {
		t.Fatalf("read %d checkpoints: %v", len(cks), errs)
	}
	if edit != nil {
		for _, ck := range cks {
			edit(ck)
		}
	}
	second := map[string][]string{}
	p := r.pipeline(second, nil)
	if restored, errs := p.Restore(cks); len(errs) > 0 || len(restored) != len(cks) {
		t.Fatalf("restored %v: %v", restored, errs)
	}
	runFrames(t, p, r.frames[r.half:], nil)
	for unit, all := range r.wholeRecs {
		first := r.firstRecs[unit]
		if got, want := len(first)+len(second[unit]), len(all); got != want {
			return fmt.Sprintf("unit %s: %d + %d frames scored, uninterrupted %d", unit, len(first), len(second[unit]), want)
		}
		for k, s := range second[unit] {
			if w := all[len(first)+k]; s != w {
				return fmt.Sprintf("unit %s frame %d after restore:\n%s\nuninterrupted:\n%s", unit, k, s, w)
			}
		}
	}
	return ""
}

// TestCheckpointRestore: a run stopped after half the frames, checkpointed
// and restored gives bit-identical scores for the second half to an
// uninterrupted run, and frames fed again from before the checkpoint are
// not scored twice.
func TestCheckpointRestore(t *testing.T) {
	// Learning is frozen while alerts are active, so the alarm engine's
	// state must come back too for the scores to match.
	cfg, ch, frames := demoFrames(t, 4*time.Hour, configs.Model{WarmUp: 100})
	if n := restartMatches(t, cfg, ch, demoPeriod, frames, len(frames)/2, nil); n == 0 {
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

// demoCheckpoints runs two hours of the demo plant (warm-up 100 frames)
// and writes its unit checkpoints into a new directory, which it returns
// with the configuration and channels they were made under.
func demoCheckpoints(t *testing.T) (*configs.Config, *stream.Channels, string) {
	t.Helper()
	cfg, ch, frames := demoFrames(t, 2*time.Hour, configs.Model{WarmUp: 100})
	p, _ := New(Options{Config: cfg, Channels: ch, Period: demoPeriod})
	runFrames(t, p, frames, nil)
	dir := t.TempDir()
	if _, err := p.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	return cfg, ch, dir
}

// TestCheckpointMismatch: a damaged checkpoint or one made under other
// settings is reported and its unit warms up again; nothing panics.
func TestCheckpointMismatch(t *testing.T) {
	cfg, ch, dir := demoCheckpoints(t)
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
	p3, _ := New(Options{Config: cfg2, Channels: ch, Period: demoPeriod})
	if restored, rerrs := p3.Restore(cks); len(restored) != 0 || len(rerrs) != 3 {
		t.Errorf("settings mismatch: restored %v, errors %v", restored, rerrs)
	}
	// Another frame demoPeriod than the checkpoints were made with.
	p2, _ := New(Options{Config: cfg, Channels: ch, Period: 10 * time.Second})
	restored, rerrs := p2.Restore(cks)
	if len(restored) != 0 || len(rerrs) != 3 {
		t.Errorf("demoPeriod mismatch: restored %v, errors %v", restored, rerrs)
	}
}

// TestCheckpointGenerations: a later checkpoint replaces the earlier one
// as a whole; an interrupted write (a generation directory without CURRENT
// naming it) is ignored; unit files placed directly in the directory are
// read when there is no CURRENT.
func TestCheckpointGenerations(t *testing.T) {
	cfg, ch, frames := demoFrames(t, 2*time.Hour, configs.Model{WarmUp: 100})
	p, _ := New(Options{Config: cfg, Channels: ch, Period: demoPeriod})
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

// TestCheckpointCarriedReadings: a run stopped at a checkpoint and
// restarted with an aligner seeded from the checkpoint's carried readings
// (ModelUnit.Last) scores every later frame bit-identically to an
// uninterrupted run over the demo data with its timestamp jitter and
// dropouts, where frames right after the cut carry readings from before
// it (the boiler reports only every other frame here, so that every other
// frame carries its readings). The reference is the uninterrupted run
// itself; a control restart without the seeds shows that the data needs
// them.
func TestCheckpointCarriedReadings(t *testing.T) {
	data := testkit.DemoLog(t, 3*time.Hour)
	var lines [][]byte
	boiler := 0
	for _, l := range bytes.SplitAfter(data, []byte("\n")) {
		if bytes.HasPrefix(l, []byte("steam,asset=boiler1 ")) {
			if boiler++; boiler%2 == 1 {
				continue
			}
		}
		lines = append(lines, l)
	}
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}}
	cfg.ApplyDefaults()
	ch, err := stream.NewChannels(nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	align := stream.Options{Align: stream.AlignConfig{Period: demoPeriod}}
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
		feedIntake(t, ch, align, p, seed, "demo", lines, true)
	}
	whole := map[string][]rec{}
	pa, _ := New(Options{Config: cfg, Channels: ch, Period: demoPeriod, OnScore: record(whole)})
	run(pa, nil, lines)

	// First part: the first half of the lines, without the final flush
	// (a crash), then a checkpoint.
	cut := len(lines) / 2
	pb, _ := New(Options{Config: cfg, Channels: ch, Period: demoPeriod})
	feedIntake(t, ch, align, pb, nil, "demo", lines[:cut], false)
	cks := checkpointsOf(t, pb)
	if len(cks) != 4 {
		t.Fatalf("%d checkpoints", len(cks))
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
	end := stream.FrameEnd(to, demoPeriod).UnixNano()
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
		pc, _ := New(Options{Config: cfg, Channels: ch, Period: demoPeriod, OnScore: record(got)})
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

// TestCheckpointSmoothedAndVariance: with model.smoothing on and the
// variance statistic among the alarm statistics, a run cut in the middle,
// checkpointed and restored gives bit-identical alarm statistics (the
// smoothed ratios, the variance statistic) for the second half to an
// uninterrupted run. Restoring the same checkpoint without its smoothed
// ratios gives different ones, so the comparison can see them.
func TestCheckpointSmoothedAndVariance(t *testing.T) {
	cfg, ch, frames := demoFrames(t, 4*time.Hour, configs.Model{WarmUp: 100, Smoothing: 0.1, Statistics: "t2,spe,phi,res,var"})

	run := newCutRun(t, Options{Config: cfg, Channels: ch, Period: demoPeriod}, frames, statBits)
	carried := 0
	for _, u := range run.cut.Units() {
		carried += len(u.smoothedState())
	}
	if carried == 0 {
		t.Fatal("no smoothed statistic to carry at the cut")
	}
	if where := run.resume(nil); where != "" {
		t.Fatal(where)
	}
	if run.resume(func(ck *ModelFile) { ck.Units[0].Smoothed = nil }) == "" {
		t.Error("dropping the smoothed ratios changed nothing: the test cannot see them")
	}
	// A damaged smoothed ratio is refused with the unit named.
	cks, _ := ReadCheckpoints(run.dir)
	cks[0].Units[0].Smoothed = []SmoothedStat{{Stat: "t2", Ratio: -1}}
	pd, _ := New(Options{Config: cfg, Channels: ch, Period: demoPeriod})
	if _, errs := pd.Restore(cks[:1]); len(errs) != 1 || !strings.Contains(errs[0].Error(), cks[0].Units[0].Name) {
		t.Errorf("negative smoothed ratio: %v", errs)
	}
}

// statBits records a unit's alarm statistics of the current frame (values
// and scaled limits) as exact bit patterns.
func statBits(u *Unit) string {
	var b strings.Builder
	for _, s := range u.appendStats(nil) {
		fmt.Fprintf(&b, "%s=%x/%x ", s.Name, math.Float64bits(s.Value), math.Float64bits(s.Limit))
	}
	return b.String()
}

type unitPub struct {
	id      string
	rev     int
	updated time.Time
	end     bool
}

// recorder keeps every unit's scores and alert revisions.
type recorder struct {
	scores map[string][]scoreRec
	pubs   map[string][]unitPub
}

func newRecorderOpts(cfg *configs.Config, ch *stream.Channels, period time.Duration) (*recorder, Options) {
	r := &recorder{scores: map[string][]scoreRec{}, pubs: map[string][]unitPub{}}
	return r, Options{Config: cfg, Channels: ch, Period: period,
		OnScore: func(u *Unit, _ time.Time) {
			s := u.Score()
			r.scores[u.Name] = append(r.scores[u.Name], scoreRec{s.T2, s.SPE, s.Ready})
		},
		Publisher: alerts.PublisherFunc(func(a *alerts.Record) {
			r.pubs[a.Unit] = append(r.pubs[a.Unit], unitPub{a.ID, a.Revision, a.Updated, a.End != nil})
		}),
	}
}

func pubsAfter(ps []unitPub, t time.Time) []unitPub {
	var out []unitPub
	for _, p := range ps {
		if p.updated.After(t) {
			out = append(out, p)
		}
	}
	return out
}

// sameScores reports the first frame at which got differs from the tail
// of want (bit for bit; NaN equals NaN), or -1.
func sameScores(got, want []scoreRec) int {
	if len(got) > len(want) {
		return 0
	}
	off := len(want) - len(got)
	for k, r := range got {
		w := want[off+k]
		if r != w && !(r.t2 != r.t2 && w.t2 != w.t2) {
			return k
		}
	}
	return -1
}

// TestCheckpointMoveUnit: one unit's checkpoint file, moved alone, carries
// the unit on bit for bit (scores and alert revisions) in a fresh pipeline,
// where the other units warm up, and in a pipeline that already runs the
// other units, which it does not disturb (issue 6: units are self-contained).
func TestCheckpointMoveUnit(t *testing.T) {
	const moved = "air"
	data := testkit.DemoLog(t, 4*time.Hour)
	ch, frames := collectFrames(t, data, demoPeriod)
	cfg := &configs.Config{Model: configs.Model{WarmUp: 100}}
	cfg.ApplyDefaults()

	whole, opt := newRecorderOpts(cfg, ch, demoPeriod)
	pa, err := New(opt)
	if err != nil {
		t.Fatal(err)
	}
	runFrames(t, pa, frames, nil)
	if len(whole.pubs[moved]) == 0 {
		t.Fatalf("no alert revisions of unit %s in the demo: the comparison would prove little", moved)
	}

	// Instance 1 checkpoints every unit after frame half.
	half := len(frames) / 2
	_, opt = newRecorderOpts(cfg, ch, demoPeriod)
	pb, _ := New(opt)
	runFrames(t, pb, frames[:half], nil)
	cks := checkpointsOf(t, pb)
	var ck *ModelFile
	for _, c := range cks {
		if c.Units[0].Name == moved {
			ck = c
		}
	}
	if ck == nil || len(ck.Units[0].Alerts) == 0 {
		t.Fatalf("no checkpoint with alarm state for unit %s", moved)
	}
	boundary := frames[half-1].Start
	// The moved unit has an alert open across the checkpoint (air's
	// incident of 01:02:20 gets its third revision at 03:03:00 in the
	// demo), so its id, revision count and the learning frozen by it must
	// travel with the file.
	spans := false
	for _, p := range whole.pubs[moved] {
		if !p.updated.After(boundary) {
			for _, q := range pubsAfter(whole.pubs[moved], boundary) {
				spans = spans || q.id == p.id
			}
		}
	}
	if !spans {
		t.Fatalf("no alert of unit %s open across the checkpoint at %v: the test would not check the alarm state (%v)", moved, boundary, whole.pubs[moved])
	}
	checkMoved := func(t *testing.T, got *recorder) {
		t.Helper()
		if len(got.scores[moved]) == 0 {
			t.Fatalf("unit %s scored nothing after the move", moved)
		}
		if k := sameScores(got.scores[moved], whole.scores[moved]); k >= 0 {
			t.Errorf("unit %s: score %d of %d after the move differs from the uninterrupted run", moved, k, len(got.scores[moved]))
		}
		if g, w := len(got.scores[moved]), len(whole.scores[moved])-int(ck.Frames); g != w {
			t.Errorf("unit %s: %d frames scored after the move, want %d (none twice)", moved, g, w)
		}
		want := pubsAfter(whole.pubs[moved], boundary)
		t.Logf("unit %s after the move: %d frames scored, %d alert revisions", moved, len(got.scores[moved]), len(want))
		if fmt.Sprint(got.pubs[moved]) != fmt.Sprint(want) {
			t.Errorf("unit %s: alert revisions after the move\n%v\nuninterrupted\n%v", moved, got.pubs[moved], want)
		}
	}

	t.Run("fresh", func(t *testing.T) {
		got, opt := newRecorderOpts(cfg, ch, demoPeriod)
		pc, _ := New(opt)
		restored, errs := pc.Restore([]*ModelFile{ck})
		if len(errs) > 0 || len(restored) != 1 {
			t.Fatalf("restored %v: %v", restored, errs)
		}
		runFrames(t, pc, frames[half-10:], nil)
		checkMoved(t, got)
		for unit, s := range got.scores {
			if unit == moved {
				continue
			}
			if len(s) == 0 || s[0].ready || !s[len(s)-1].ready {
				t.Errorf("unit %s (not moved) should warm up and then score: first ready %v of %d", unit, len(s) > 0 && s[0].ready, len(s))
			}
		}
	})

	t.Run("beside others", func(t *testing.T) {
		// Instance 2 runs the other units from the start; the moved unit's
		// readings reach it only from about frame half − 5 on.
		lines := bytes.SplitAfter(data, []byte("\n"))
		cut := -1
		var first, second bytes.Buffer
		for i, l := range lines {
			if cut < 0 && len(l) > 0 {
				if ts := lineTime(t, l); !ts.Before(frames[half-5].Start) {
					cut = i
				}
			}
			switch {
			case cut >= 0:
				second.Write(l)
			case !bytes.HasPrefix(l, []byte(moved+",")):
				first.Write(l)
			}
		}
		ch2, err := stream.NewChannels(nil, 0)
		if err != nil {
			t.Fatal(err)
		}
		got, opt := newRecorderOpts(cfg, ch2, demoPeriod)
		pd, _ := New(opt)
		in, err := stream.NewIntake(ch2, stream.Options{Align: stream.AlignConfig{Period: demoPeriod}}, pd.Frame)
		if err != nil {
			t.Fatal(err)
		}
		if err := in.Read(context.Background(), "part1", &first); err != nil {
			t.Fatal(err)
		}
		if pd.Unit(moved) != nil {
			t.Fatalf("unit %s exists before its readings came", moved)
		}
		restored, errs := pd.Restore([]*ModelFile{ck})
		if len(errs) > 0 || len(restored) != 1 {
			t.Fatalf("restored %v: %v", restored, errs)
		}
		if err := in.Read(context.Background(), "part2", &second); err != nil {
			t.Fatal(err)
		}
		if err := in.Flush(); err != nil {
			t.Fatal(err)
		}
		checkMoved(t, got)
		for unit, w := range whole.scores {
			if unit == moved {
				continue
			}
			if g := got.scores[unit]; len(g) != len(w) || sameScores(g, w) >= 0 {
				t.Errorf("unit %s disturbed by the move: %d scores, uninterrupted %d", unit, len(g), len(w))
			}
			if fmt.Sprint(got.pubs[unit]) != fmt.Sprint(whole.pubs[unit]) {
				t.Errorf("unit %s: alert revisions differ from the uninterrupted run", unit)
			}
		}
	})
}

// lineTime reads the timestamp (ns) at the end of a line-protocol line.
func lineTime(t *testing.T, l []byte) time.Time {
	t.Helper()
	l = bytes.TrimSpace(l)
	i := bytes.LastIndexByte(l, ' ')
	var ns int64
	if _, err := fmt.Sscan(string(l[i+1:]), &ns); err != nil {
		t.Fatalf("line %q: %v", l, err)
	}
	return time.Unix(0, ns)
}

// TestCheckpointLegacyAlarmFile: a generation written before units carried
// their own alarm state (unit files without it, one alarm file for all)
// still restores every unit with its alarms; a damaged alarm file is
// reported as an incompatible checkpoint and the units warm up again.
func TestCheckpointLegacyAlarmFile(t *testing.T) {
	cfg, ch, frames := demoFrames(t, 3*time.Hour, configs.Model{WarmUp: 100})
	_, opt := newRecorderOpts(cfg, ch, demoPeriod)
	p, _ := New(opt)
	runFrames(t, p, frames, nil)
	open := p.Alerts().Open(nil)
	if len(open) == 0 {
		t.Fatal("no alert open at the end: the test would not check the alarm state")
	}
	dir := t.TempDir()
	if _, err := p.WriteCheckpoints(dir); err != nil {
		t.Fatal(err)
	}
	// Rewrite the generation in the earlier layout.
	gdir, err := currentDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	cks, errs := ReadCheckpoints(dir)
	if len(errs) > 0 {
		t.Fatal(errs)
	}
	for _, ck := range cks {
		ck.Units[0].Alerts = nil
		if err := WriteModel(CheckpointPath(gdir, ck.Units[0].Name), ck); err != nil {
			t.Fatal(err)
		}
	}
	var all bytes.Buffer
	if err := p.Alerts().Snapshot(&all); err != nil {
		t.Fatal(err)
	}
	legacy := filepath.Join(gdir, AlertsFile)
	if err := os.WriteFile(legacy, all.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	cks, errs = ReadCheckpoints(dir)
	_, opt = newRecorderOpts(cfg, ch, demoPeriod)
	p2, _ := New(opt)
	restored, rerrs := p2.Restore(cks)
	if len(errs) > 0 || len(rerrs) > 0 || len(restored) != len(cks) {
		t.Fatalf("restored %v: %v %v", restored, errs, rerrs)
	}
	if got := p2.Alerts().Open(nil); fmt.Sprint(got) != fmt.Sprint(open) {
		t.Errorf("open alerts after restoring the earlier layout:\n%v\nbefore:\n%v", got, open)
	}

	if err := os.WriteFile(legacy, all.Bytes()[:all.Len()/2], 0o644); err != nil {
		t.Fatal(err)
	}
	cks, _ = ReadCheckpoints(dir)
	_, opt = newRecorderOpts(cfg, ch, demoPeriod)
	p3, _ := New(opt)
	restored, rerrs = p3.Restore(cks)
	if len(restored) != 0 || len(rerrs) != len(cks) {
		t.Fatalf("damaged alarm file: restored %v, errors %v", restored, rerrs)
	}
	for _, err := range rerrs {
		if !strings.Contains(err.Error(), "incompatible checkpoint, the unit warms up again") {
			t.Errorf("error does not say what happens: %v", err)
		}
	}
	if n := len(p3.Units()); n != 0 {
		t.Errorf("%d units left behind by refused checkpoints", n)
	}
	if len(p3.Alerts().Counters(nil)) != 0 {
		t.Error("a refused checkpoint left alarm state behind")
	}
	runFrames(t, p3, frames[:5], nil)
	for _, u := range p3.Units() {
		if u.Score().Ready {
			t.Errorf("unit %s scores at once: not warming up", u.Name)
		}
	}
}

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
		feedIntake(t, ch, stream.Options{Align: stream.AlignConfig{Period: period}}, p, seeds, "u", lines, flush)
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
	cks := checkpointsOf(t, pb)
	if len(cks) != 1 {
		t.Fatalf("%d checkpoints", len(cks))
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

// TestCheckpointScreenState: on the data-quality test plant (profile_test.go)
// started from its fitted normal day, a run cut in the middle of a
// data-quality condition, checkpointed and restored (fed again from 10
// frames before the cut, as redelivery does) publishes exactly the alert
// records of the uninterrupted run after the cut, for each rule whose
// state runs over frames:
//
//	stuck    flow frozen, cut 10 frames into the flat run (before the alert)
//	spikes   flow spiking +15 every 15 frames, cut after 3 spikes (before
//	         the alert)
//	missing  level's readings gone, cut a few frames into the gap (within
//	         its normal longest gap, before the missing hold runs)
//	silent   the press unit's gateway silent, cut inside the outage (the
//	         screen recomputes silence every frame; the open alert is the
//	         alarm engine's state)
//
// The reference is the uninterrupted run itself (behaviour test). For the
// first three, the same checkpoint restored without its screen runs
// (ModelUnit.Screen dropped, as a version 3 checkpoint, which restores)
// publishes
// different records, so the comparison sees the carried state.
func TestCheckpointScreenState(t *testing.T) {
	cfg := qConfig(t)
	m := qFit(t, cfg)
	const (
		freezeFrom, freezeTo = qDay + 200, qDay + 440
		spikeFrom, spikeTo   = qDay + 600, qDay + 900
		dropFrom, dropTo     = qDay + 1000, qDay + 1090
		quietFrom, quietTo   = qDay + 1150, qDay + 1200
		end                  = qDay + 1300
	)
	ev := qEvents{
		frozen: func(k int) bool { return k >= freezeFrom && k < freezeTo },
		spike: func(k int) float64 {
			if k >= spikeFrom && k < spikeTo && (k-spikeFrom)%15 == 0 {
				return 15
			}
			return 0
		},
		drop:   func(k int) bool { return k >= dropFrom && k < dropTo },
		silent: func(k int, u string) bool { return u == "press" && k >= quietFrom && k < quietTo },
	}
	ch, frames := collectFrames(t, qPlant(qDay, end, ev, 4), qPeriod)
	// at returns the index of the frame of plant frame k.
	at := func(k int) int {
		t0 := qStart.Add(time.Duration(k) * qPeriod)
		return slices.IndexFunc(frames, func(f stream.Frame) bool { return !f.Start.Before(t0) })
	}
	type rec struct {
		updated time.Time
		kind    string // quality kind/channel, "" for others
		json    string
	}
	publisher := func(dst *[]rec) alerts.Publisher {
		return alerts.PublisherFunc(func(r *alerts.Record) {
			b, err := json.Marshal(r)
			if err != nil {
				t.Fatal(err)
			}
			kind := ""
			if r.Quality != nil {
				kind = r.Quality.Kind + "/" + r.Quality.Channel
			}
			*dst = append(*dst, rec{r.Updated, kind, string(b)})
		})
	}
	newPipe := func(pub alerts.Publisher) *Pipeline {
		p, err := New(Options{Config: cfg, Channels: ch, Period: qPeriod, Baseline: m, Publisher: pub})
		if err != nil {
			t.Fatal(err)
		}
		return p
	}
	var whole []rec
	runFrames(t, newPipe(publisher(&whole)), frames, nil)

	cases := []struct {
		name, kind string // kind: the record kind/channel the cut is inside
		cut        int    // plant frame
		sees       bool   // whether dropping the screen runs must change the records
	}{
		{"stuck", alerts.QualityStuck + "/press.line.flow", freezeFrom + 10, true},
		{"spikes", alerts.QualitySpikes + "/press.line.flow", spikeFrom + 35, true},
		{"missing", alerts.QualityMissing + "/feed.tank.level", dropFrom + 6, true},
		{"silent", alerts.QualitySilent + "/press", quietFrom + 20, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cut := at(c.cut)
			boundary := frames[cut-1].Start
			var want []string
			raised := false
			for _, r := range whole {
				if r.updated.After(boundary) {
					want = append(want, r.json)
					raised = raised || r.kind == c.kind
				}
			}
			if !raised {
				t.Fatalf("the uninterrupted run has no %s record after the cut: the case tests nothing", c.kind)
			}
			pb := newPipe(nil)
			runFrames(t, pb, frames[:cut], nil)
			dir := t.TempDir()
			if _, err := pb.WriteCheckpoints(dir); err != nil {
				t.Fatal(err)
			}
			resume := func(edit func(*ModelFile)) []string {
				cks, errs := ReadCheckpoints(dir)
				if len(errs) > 0 || len(cks) != 2 {
					t.Fatalf("read %d checkpoints: %v", len(cks), errs)
				}
				carried := 0
				for _, ck := range cks {
					carried += len(ck.Units[0].Screen)
					if edit != nil {
						edit(ck)
					}
				}
				if carried == 0 {
					t.Fatal("the checkpoint carries no screen runs")
				}
				var got []rec
				pc := newPipe(publisher(&got))
				if restored, errs := pc.Restore(cks); len(errs) > 0 || len(restored) != 2 {
					t.Fatalf("restored %v: %v", restored, errs)
				}
				runFrames(t, pc, frames[cut-10:], nil)
				var out []string
				for _, r := range got {
					out = append(out, r.json)
				}
				return out
			}
			if got := resume(nil); !slices.Equal(got, want) {
				t.Errorf("records after the restart differ from the uninterrupted run's:\n%s", recordDiff(got, want))
			}
			// A version 3 checkpoint (no screen runs) still restores, with
			// every run starting empty.
			if c.sees && slices.Equal(resume(func(ck *ModelFile) { ck.Version, ck.Units[0].Screen = 3, nil }), want) {
				t.Error("control: restored without the screen runs, the records are the same: the case cannot see them")
			}
		})
	}
}

// recordDiff describes where two record lists first differ.
func recordDiff(got, want []string) string {
	for i := range min(len(got), len(want)) {
		if got[i] != want[i] {
			return fmt.Sprintf("record %d:\n got  %s\n want %s", i, got[i], want[i])
		}
	}
	return fmt.Sprintf("%d records, want %d", len(got), len(want))
}

// TestCheckpointBadQualityProfile: a checkpoint whose data-quality profile
// could not have come from fit (here a negative spike count, which would
// hold the channel spiky on every frame, and a longest flat run at which
// the stuck threshold overflows) is refused, naming the field, and its
// unit warms up again.
func TestCheckpointBadQualityProfile(t *testing.T) {
	cfg, ch, dir := demoCheckpoints(t)
	for _, c := range []struct {
		field string
		prof  alerts.ChannelProfile
	}{
		{"spike_max", alerts.ChannelProfile{Frames: 100, SpikeSize: 1, SpikeMax: -5, SpikeSpanFrames: 360}},
		{"max_flat", alerts.ChannelProfile{Frames: 100, MaxFlat: math.MaxInt - 1}},
		{"flat_tail", alerts.ChannelProfile{Frames: 100, FlatTail: -1}},
	} {
		cks, errs := ReadCheckpoints(dir)
		if len(errs) != 0 || len(cks) == 0 {
			t.Fatalf("checkpoints: %d, errors %v", len(cks), errs)
		}
		mu := &cks[0].Units[0]
		c.prof.Channel = mu.Channels[0]
		mu.Quality = []alerts.ChannelProfile{c.prof}
		p2, _ := New(Options{Config: cfg, Channels: ch, Period: demoPeriod})
		restored, rerrs := p2.Restore(cks[:1])
		if len(restored) != 0 || len(rerrs) != 1 {
			t.Fatalf("%s: restored %v, errors %v", c.field, restored, rerrs)
		}
		if !errors.Is(rerrs[0], ErrModelFile) || !strings.Contains(rerrs[0].Error(), c.field) {
			t.Errorf("%s: error %v does not wrap ErrModelFile or name the field", c.field, rerrs[0])
		}
	}
}

// TestCheckpointMewma: with the MEWMA statistic among the alarm
// statistics, a run cut in the middle, checkpointed and restored gives
// bit-identical alarm statistics (values and scaled limits; the alarm
// state steers learning, so they also show it) for the second half to an
// uninterrupted run: its smoothed frame travels in the tracker's state.
// Restoring the same checkpoint with the smoothed frame set to zero gives
// different statistics, so the comparison can see it.
func TestCheckpointMewma(t *testing.T) {
	checkSmoothedCut(t, configs.Model{WarmUp: 100, Statistics: "t2,spe,phi,res,mewma", MewmaLambda: 0.05}, "mewma", "MEWMA statistic",
		func(u *Unit) { u.tr.ResetMewma() }, "without the MEWMA statistic's smoothed frame")
}

// TestCheckpointCreep is TestCheckpointMewma for the creep statistic: its
// smoothed frame, smoothed residuals, learned normal moments and factors
// travel in the tracker's state (bit-identical alarm statistics after a
// cut and restore); restoring with the smoothing started again
// (tracker.ResetCreep) differs, so the comparison can see it.
func TestCheckpointCreep(t *testing.T) {
	checkSmoothedCut(t, configs.Model{WarmUp: 100, Statistics: "t2,spe,phi,res,creep", CreepLambda: 0.05}, "creep", "creep statistic",
		func(u *Unit) { u.tr.ResetCreep() }, "with the creep statistic's smoothing started again")
}

// checkSmoothedCut runs four hours of the demo plant under model, cut in
// the middle, checkpointed and restored (newCutRun), and checks that some
// frame scored the smoothed statistic what (record key key), that the
// restored run's alarm statistics are bit-identical to the uninterrupted
// run's (statBits), and that restoring the checkpoint with the first
// unit's tracker state taken after reset gives different statistics, else
// the test cannot see the state; lost says what reset drops.
func checkSmoothedCut(t *testing.T, model configs.Model, key, what string, reset func(*Unit), lost string) {
	t.Helper()
	cfg, ch, frames := demoFrames(t, 4*time.Hour, model)
	run := newCutRun(t, Options{Config: cfg, Channels: ch, Period: demoPeriod}, frames, statBits)
	scored := 0
	for _, recs := range run.wholeRecs {
		for _, s := range recs {
			if strings.Contains(s, key+"=") {
				scored++
			}
		}
	}
	if scored == 0 {
		t.Fatalf("no frame scored the %s", what)
	}
	if where := run.resume(nil); where != "" {
		t.Fatal(where)
	}
	restarted := func(ck *ModelFile) {
		mu := &ck.Units[0]
		for _, u := range run.cut.Units() {
			if u.Name != mu.Name || mu.States != nil {
				continue
			}
			reset(u)
			b, err := u.tr.MarshalBinary()
			if err != nil {
				t.Fatal(err)
			}
			mu.State = b
		}
	}
	if run.resume(restarted) == "" {
		t.Errorf("restoring %s changed nothing: the test cannot see it", lost)
	}
}
