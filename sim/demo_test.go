package sim

import (
	"bytes"
	"math"
	"os"
	"strings"
	"testing"
	"time"
)

// TestDemoCopyIdentical guards the rule that the embedded demo scenario and
// the shipped configs/scenario-demo.yaml are the same file.
func TestDemoCopyIdentical(t *testing.T) {
	shipped, err := os.ReadFile("../configs/scenario-demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(shipped, DemoYAML) {
		t.Fatal("configs/scenario-demo.yaml and sim/scenario-demo.yaml differ; copy one onto the other")
	}
}

// TestDemoShape checks the demo against what it promises: 40–60 channels in
// 3–4 units, 5–7 labelled faults of different kinds, at 10–30 s, 3–7
// fault-free normal days before the split (several, as a plant engineer
// would fit on) and two test days after it (the live demo's length), every
// fault within the test days and on few channels, and no two faults of one
// unit overlapping (so a label names one cause).
func TestDemoShape(t *testing.T) {
	s, err := Demo()
	if err != nil {
		t.Fatal(err)
	}
	if n := len(s.Channels()); n < 40 || n > 60 {
		t.Errorf("%d channels", n)
	}
	if n := len(s.Units); n < 3 || n > 4 {
		t.Errorf("%d units", n)
	}
	normal := s.Split.Sub(s.Start)
	if normal < 3*24*time.Hour || normal > 7*24*time.Hour || s.End().Sub(s.Split) != 48*time.Hour || s.Period < 10*time.Second || s.Period > 30*time.Second {
		t.Errorf("split after %v of %v, period %v", normal, s.Duration, s.Period)
	}
	if n := len(s.Episodes); n < 5 || n > 7 {
		t.Errorf("%d episodes", n)
	}
	kinds := map[FaultKind]bool{}
	for i, e := range s.Episodes {
		kinds[e.Kind] = true
		if e.Start.Before(s.Split) || e.End.After(s.End()) {
			t.Errorf("%s: %v..%v outside the test days [split, end]", e.ID, e.Start, e.End)
		}
		if len(e.Channels) > 3 {
			t.Errorf("%s: %d channels", e.ID, len(e.Channels))
		}
		for _, f := range s.Episodes[i+1:] {
			if unitOf(e.Channels[0]) == unitOf(f.Channels[0]) && e.Start.Before(f.End) && f.Start.Before(e.End) {
				t.Errorf("%s and %s overlap in unit %s", e.ID, f.ID, unitOf(e.Channels[0]))
			}
		}
	}
	if len(kinds) != len(s.Episodes) {
		t.Errorf("%d kinds among %d episodes", len(kinds), len(s.Episodes))
	}
}

func unitOf(ch string) string { return ch[:strings.IndexByte(ch, '.')] }

// TestDemoFaultsDetectableNotTrivial runs the demo with and without its
// faults. Detectable: each fault moves its channels by at least 3 noise σ
// at some sample. Not trivial: for the slow kinds, at least 80 % of the
// faulty values stay inside the range the channel spans in the fault-free
// normal days before the split, so a plain high/low limit would not catch
// them.
func TestDemoFaultsDetectableNotTrivial(t *testing.T) {
	s, err := Demo()
	if err != nil {
		t.Fatal(err)
	}
	last := s.Start
	for _, e := range s.Episodes {
		if e.End.After(last) {
			last = e.End
		}
	}
	s.Duration = last.Sub(s.Start)
	for _, f := range faultEffects(t, s, s.Split) {
		if f.maxDev < 3*f.noise {
			t.Errorf("%s on %s: largest change %.3g < 3σ = %.3g", f.id, f.channel, f.maxDev, 3*f.noise)
		}
		switch f.kind {
		case Bias, Drift, Stuck, Relation, Effect:
			if f.inside < 0.8 {
				t.Errorf("%s on %s: only %.0f%% of faulty values inside the normal days' range", f.id, f.channel, 100*f.inside)
			}
		}
		t.Logf("%s %s: max change %.3g (%.1fσ), %.0f%% inside normal range", f.id, f.channel, f.maxDev, f.maxDev/f.noise, 100*f.inside)
	}
}

// faultEffect is what one fault does to one of its channels.
type faultEffect struct {
	id, channel string
	kind        FaultKind
	noise       float64 // the channel's noise σ
	maxDev      float64 // largest |faulty − fault-free| value during the fault
	inside      float64 // share of the faulty values inside the channel's range before normalEnd
}

// faultEffects runs s with and without its faults (outages and dropouts
// left out: they remove values) and measures every fault on every channel.
func faultEffects(t *testing.T, s *Scenario, normalEnd time.Time) []faultEffect {
	t.Helper()
	clean := s.Clone()
	clean.Episodes = nil
	infos := s.Channels()
	idx := map[string]int{}
	noise := make([]float64, len(infos))
	k := 0
	for _, u := range s.Units {
		for _, a := range u.Assets {
			for _, c := range a.Channels {
				idx[infos[k].Name] = k
				noise[k] = c.Noise
				k++
			}
		}
	}
	lo, hi := make([]float64, len(infos)), make([]float64, len(infos))
	for i := range lo {
		lo[i], hi[i] = math.Inf(1), math.Inf(-1)
	}
	type acc struct{ maxDev, in, n float64 }
	stats := make([]map[int]*acc, len(s.Episodes))
	for i, e := range s.Episodes {
		stats[i] = map[int]*acc{}
		if e.Kind == Outage || e.Kind == Dropout {
			continue
		}
		for _, c := range e.Channels {
			stats[i][idx[c]] = &acc{}
		}
	}
	g, _ := s.NewGenerator()
	gc, _ := clean.NewGenerator()
	for g.Step() && gc.Step() {
		v, vc := g.Values(), gc.Values()
		if g.Time().Before(normalEnd) {
			for i, x := range v {
				if !math.IsNaN(x) {
					lo[i], hi[i] = math.Min(lo[i], x), math.Max(hi[i], x)
				}
			}
			continue
		}
		for i, e := range s.Episodes {
			if g.Time().Before(e.Start) || !g.Time().Before(e.End) {
				continue
			}
			for ci, a := range stats[i] {
				if math.IsNaN(v[ci]) || math.IsNaN(vc[ci]) {
					continue
				}
				a.maxDev = math.Max(a.maxDev, math.Abs(v[ci]-vc[ci]))
				a.n++
				if v[ci] >= lo[ci] && v[ci] <= hi[ci] {
					a.in++
				}
			}
		}
	}
	var out []faultEffect
	for i, e := range s.Episodes {
		for _, c := range e.Channels {
			a, ok := stats[i][idx[c]]
			if !ok {
				continue
			}
			out = append(out, faultEffect{id: e.ID, channel: c, kind: e.Kind, noise: noise[idx[c]], maxDev: a.maxDev, inside: a.in / a.n})
		}
	}
	return out
}

// TestLargeScenario: the performance scenario has 1,000 channels and loads.
func TestLargeScenario(t *testing.T) {
	s, err := Load("../configs/scenario-large.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if n := len(s.Channels()); n != 1000 {
		t.Errorf("%d channels, want 1000", n)
	}
	// A short stretch generates and encodes without error.
	s.Duration = 10 * s.Period
	if err := s.WriteLineProtocol(&bytes.Buffer{}); err != nil {
		t.Fatal(err)
	}
}

// TestDemoParts: the demo's normal part (what the demo fits) is exactly
// the normal.lp of one run written with its split, without a split or a
// fault; its test part starts at the split, holds the two test days and
// every fault; Head cuts before the split into normal days only and after
// it keeps the split and the faults that started.
func TestDemoParts(t *testing.T) {
	s, err := Demo()
	if err != nil {
		t.Fatal(err)
	}
	n := s.Normal()
	if !n.Split.IsZero() || n.End() != s.Split || len(n.Episodes) != 0 {
		t.Errorf("normal part: split %v, end %v, %d episodes", n.Split, n.End(), len(n.Episodes))
	}
	dir := t.TempDir()
	files, err := s.WriteSplit(dir, false, s.Start, s.Split.Add(time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	written, err := os.ReadFile(files.Normal)
	if err != nil {
		t.Fatal(err)
	}
	if got := lpBytes(t, n); !bytes.Equal(got, written) {
		t.Errorf("the normal part's readings (%d bytes) differ from normal.lp (%d bytes)", len(got), len(written))
	}
	ts := s.Tested()
	if !ts.Split.IsZero() || ts.Start != s.Split || ts.End() != s.End() || len(ts.Episodes) != len(s.Episodes) {
		t.Errorf("test part: split %v, %v to %v, %d episodes", ts.Split, ts.Start, ts.End(), len(ts.Episodes))
	}
	if _, err := ts.NewGenerator(); err != nil {
		t.Errorf("test part: %v", err)
	}
	if h := s.Head(30 * time.Hour); !h.Split.IsZero() || len(h.Episodes) != 0 || h.Duration != 30*time.Hour {
		t.Errorf("head of 30 h: split %v, %d episodes", h.Split, len(h.Episodes))
	}
	if h := s.Head(s.Split.Sub(s.Start) + 6*time.Hour); h.Split != s.Split || len(h.Episodes) != 1 {
		t.Errorf("head to 6 h past the split: split %v, %d episodes", h.Split, len(h.Episodes))
	}
	if len(s.Episodes) != 7 || s.Duration != 144*time.Hour {
		t.Errorf("the parts changed the scenario: %d episodes, %v", len(s.Episodes), s.Duration)
	}
	if h := s.Head(time.Hour); h.Normal() != h || h.Tested() != h {
		t.Error("a scenario without a split is its own normal and test part")
	}
}
