package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/configs"
	"modewatch/stream"
)

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
	const moved = "coolwater"
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
	// The moved unit has an alert open across the checkpoint (coolwater's
	// incident of 00:46:40 gets its third revision at 02:30:40 in the
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
