package alerts

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// screenStateCase is a seeded stretch of three channels of invented data
// (behaviour test: the reference is the uninterrupted screen itself):
// u.flat freezes at a live value for 5 to 40 frames now and then (its
// normal longest flat run is 5), u.spiky has one-frame spikes of ±10 on
// noise of σ 0.5 (spike size 3, normal count 0 per 40 frames), u.drop
// drops out for 1 to 8 frames now and then (normal longest gap 2).
func screenStateCase() ([]string, []ChannelProfile, [][]float64, [][]bool) {
	names := []string{"u.flat", "u.spiky", "u.drop"}
	prof := []ChannelProfile{
		{Channel: "u.flat", Frames: 1000, MaxFlat: 5, Min: 0, Max: 100, Step: 0.001},
		{Channel: "u.spiky", Frames: 1000, MaxFlat: 3, Min: 0, Max: 100, Step: 0.001, SpikeSize: 3, SpikeMax: 0, SpikeSpanFrames: 40},
		{Channel: "u.drop", Frames: 1000, MaxFlat: 3, Min: 0, Max: 100, Step: 0.001, MaxGap: 2},
	}
	rng := rand.New(rand.NewPCG(12, 18))
	const n = 600
	xs, ms := make([][]float64, n), make([][]bool, n)
	frozen, dropped := 0, 0
	held := 50.0
	for k := range n {
		x, m := make([]float64, 3), make([]bool, 3)
		if frozen == 0 && rng.Float64() < 0.03 {
			frozen = 5 + rng.IntN(36)
			held = 50 + rng.NormFloat64()
		}
		if frozen > 0 {
			frozen--
			x[0] = held
		} else {
			x[0] = 50 + rng.NormFloat64()
		}
		x[1] = 50 + 0.5*rng.NormFloat64()
		if rng.Float64() < 0.08 {
			x[1] += 10 * float64(1-2*rng.IntN(2))
		}
		if dropped == 0 && rng.Float64() < 0.04 {
			dropped = 1 + rng.IntN(8)
		}
		x[2] = 20 + rng.NormFloat64()
		if dropped > 0 {
			dropped--
			x[2], m[2] = math.NaN(), true
		}
		xs[k], ms[k] = x, m
	}
	return names, prof, xs, ms
}

// screenTrace steps s through frames xs, ms and writes, per frame, the
// conditions AppendQuality reports and the channels MissingAlarm names.
func screenTrace(s *Screen, xs [][]float64, ms [][]bool) []string {
	var out []string
	var q []Quality
	for k := range xs {
		s.Step(xs[k], ms[k])
		q = s.AppendQuality(q[:0])
		line := fmt.Sprint(q)
		for c := range ms[k] {
			if ms[k][c] && s.MissingAlarm(c) {
				line += " missing:" + s.names[c]
			}
		}
		out = append(out, line)
	}
	return out
}

// TestScreenStateRestart: a screen cut at every frame of the stretch, its
// state carried through JSON (AppendState, SetState) into a new screen,
// reports exactly the conditions of the uninterrupted screen at every
// frame after the cut: stuck (a flat run in progress), spikes (spikes in
// the span) and the missing hold (a dropout in progress). A new screen
// without the state differs after some cuts, so the comparison sees each
// rule's state.
func TestScreenStateRestart(t *testing.T) {
	names, prof, xs, ms := screenStateCase()
	whole := screenTrace(NewScreen("u", names, prof), xs, ms)
	kinds := map[string]bool{}
	for _, l := range whole {
		for _, k := range []string{QualityStuck, QualitySpikes, "missing:"} {
			kinds[k] = kinds[k] || strings.Contains(l, k)
		}
	}
	if len(kinds) != 3 || !kinds[QualityStuck] || !kinds[QualitySpikes] || !kinds["missing:"] {
		t.Fatalf("the stretch does not raise every rule: %v", kinds)
	}
	blind := map[string]int{} // cuts after which a screen without state differs, by rule
	for cut := 1; cut < len(xs); cut++ {
		a := NewScreen("u", names, prof)
		screenTrace(a, xs[:cut], ms[:cut])
		b, err := json.Marshal(a.AppendState(nil))
		if err != nil {
			t.Fatal(err)
		}
		var runs []ChannelRun
		if err := json.Unmarshal(b, &runs); err != nil {
			t.Fatal(err)
		}
		r := NewScreen("u", names, prof)
		if err := r.SetState(runs); err != nil {
			t.Fatalf("cut %d: %v", cut, err)
		}
		got := screenTrace(r, xs[cut:], ms[cut:])
		for k, l := range got {
			if w := whole[cut+k]; l != w {
				t.Fatalf("cut %d, frame %d after it: %s; uninterrupted: %s", cut, k, l, w)
			}
		}
		fresh := screenTrace(NewScreen("u", names, prof), xs[cut:], ms[cut:])
		for k, l := range fresh {
			if w := whole[cut+k]; l != w {
				for kind := range kinds {
					if strings.Contains(l, kind) != strings.Contains(w, kind) {
						blind[kind]++
					}
				}
				break
			}
		}
	}
	for kind := range kinds {
		if blind[kind] == 0 {
			t.Errorf("a screen without the carried state never differs on %s: the test cannot see that rule's state", kind)
		}
	}
	t.Logf("cuts where a screen without state differs, by rule: %v", blind)
}

// TestScreenStateRefused: a damaged or hostile screen state is refused
// with the entry named, and the screen is left as it was.
func TestScreenStateRefused(t *testing.T) {
	names, prof, xs, ms := screenStateCase()
	s := NewScreen("u", names, prof)
	screenTrace(s, xs[:100], ms[:100])
	before := fmt.Sprint(s.AppendState(nil))
	cases := []struct {
		name string
		runs []ChannelRun
		want string
	}{
		{"stranger", []ChannelRun{{Channel: "v.x", Flat: 1}}, "not one of unit"},
		{"twice", []ChannelRun{{Channel: "u.flat", Flat: 1}, {Channel: "u.flat", Gap: 1}}, "listed twice"},
		{"negative", []ChannelRun{{Channel: "u.flat", Flat: -1}}, "negative run"},
		{"three recent", []ChannelRun{{Channel: "u.spiky", Recent: []float64{1, 2, 3}}}, "3 recent readings"},
		{"too many spikes", []ChannelRun{{Channel: "u.spiky", Spikes: make([]int64, MaxSpikeCount+1)}}, "spikes (at most"},
		{"ages not ascending", []ChannelRun{{Channel: "u.spiky", Spikes: []int64{3, 2}}}, "not positive and ascending"},
		{"age zero", []ChannelRun{{Channel: "u.spiky", Spikes: []int64{0}}}, "not positive and ascending"},
		{"infinite value", []ChannelRun{{Channel: "u.flat", Flat: 2, Value: math.Inf(1)}}, "not finite"},
		{"NaN reading", []ChannelRun{{Channel: "u.spiky", Recent: []float64{math.NaN()}}}, "not finite"},
		{"level hold too old", []ChannelRun{{Channel: "u.flat", LevelHold: MaxLevelHold + 1}}, "level-shift holds"},
		{"negative quality hold", []ChannelRun{{Channel: "u.flat", QualityHold: -1}}, "level-shift holds"},
	}
	for _, c := range cases {
		err := s.SetState(c.runs)
		if !errors.Is(err, ErrInput) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want %q", c.name, err, c.want)
		}
		if after := fmt.Sprint(s.AppendState(nil)); after != before {
			t.Errorf("%s: refused state changed the screen", c.name)
		}
	}
	// No state: every run starts empty.
	if err := s.SetState(nil); err != nil || len(s.AppendState(nil)) != 0 {
		t.Errorf("empty state: %v, runs left %v", err, s.AppendState(nil))
	}
}

// The level-shift rule's waits travel in the screen state: a screen
// restored from a state taken two frames after another channel's
// out-of-range reading (span 3) names a level shift exactly when the one
// that ran on does, and a channel's own gap likewise.
func TestScreenStateLevelHolds(t *testing.T) {
	prof := []ChannelProfile{
		{Channel: "u.a", Frames: 100, LevelStepMax: 1, Min: 0, Max: 10},
		{Channel: "u.b", Frames: 100, Min: 3, Max: 5},
	}
	names := []string{"u.a", "u.b"}
	for _, c := range []struct {
		name string
		x    []float64
		miss []bool
	}{
		{"another channel out of range", []float64{1, 1e6}, []bool{false, false}},
		{"own gap", []float64{1, 4}, []bool{true, false}},
	} {
		run := NewScreen("u", names, prof)
		run.Step([]float64{1, 4}, make([]bool, 2))
		run.AppendQuality(nil)
		run.Step(c.x, c.miss)
		run.AppendQuality(nil)
		run.Step([]float64{1.1, 4}, make([]bool, 2))
		run.AppendQuality(nil)
		st := run.AppendState(nil)
		back := NewScreen("u", names, prof)
		if err := back.SetState(st); err != nil {
			t.Fatal(err)
		}
		for f := 0; f < 4; f++ {
			var got [2]bool
			for i, s := range []*Screen{run, back} {
				s.Step([]float64{1.2 + float64(f)/10, 4}, make([]bool, 2))
				s.SetLevelSteps([]float64{5, 0}, true, 3)
				for _, q := range s.AppendQuality(nil) {
					got[i] = got[i] || q.Kind == QualityLevelShift
				}
			}
			if got[0] != got[1] || got[0] != (f >= 2) {
				t.Errorf("%s, frame %d after the state: level shift %v (ran on) and %v (restored), want %v", c.name, f, got[0], got[1], f >= 2)
			}
		}
	}
}
