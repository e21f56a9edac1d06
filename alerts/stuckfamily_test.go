package alerts

import (
	"fmt"
	"testing"
)

// TestStuckAfterOf: the stuck margin of a channel in a unit of n channels
// whose margin the tail sets, by hand: MaxFlat 36, tail scale 5;
// n = 24: (4 + ln 24)·5 = 7.178·5 = 35.89, ⌈·⌉ = 36, so 36 + 36 = 72;
// n = 1 (or 0): 4·5 = 20, so 56 (StuckAfter); a tail under StuckMargin's
// share keeps StuckMargin whatever n (0.8·(4 + ln 24) = 5.7 < 15).
func TestStuckAfterOf(t *testing.T) {
	for _, c := range []struct {
		p    ChannelProfile
		n    int
		want int
	}{
		{ChannelProfile{MaxFlat: 36, FlatTail: 5}, 24, 72},
		{ChannelProfile{MaxFlat: 36, FlatTail: 5}, 1, 56},
		{ChannelProfile{MaxFlat: 36, FlatTail: 5}, 0, 56},
		{ChannelProfile{MaxFlat: 36, FlatTail: 0.8}, 24, 36 + StuckMargin},
	} {
		if got := c.p.StuckAfterOf(c.n); got != c.want {
			t.Errorf("StuckAfterOf(%d) of max flat %d, tail %v = %d, want %d", c.n, c.p.MaxFlat, c.p.FlatTail, got, c.want)
		}
	}
	if p := (ChannelProfile{MaxFlat: 36, FlatTail: 5}); p.StuckAfter() != p.StuckAfterOf(1) {
		t.Errorf("StuckAfter %d, StuckAfterOf(1) %d: want the same", p.StuckAfter(), p.StuckAfterOf(1))
	}
}

// TestStuckFamily: a network of 24 substation valves quantised to 2 %,
// each held by its controller up to 36 frames in the normal log (tail
// scale 5), and an analog flow (tail 0.5, StuckMargin decides, so it does
// not count): a valve held 70 frames is not stuck, one held on is stuck
// from frame 73 (past 72, TestStuckAfterOf), where a valve alone in its
// unit is stuck from 57 (TestStuckQuantisedHeld); the flow frozen is
// stuck after 3 + StuckMargin frames as before. Left to another unit
// (Skip), valves stop counting. Design figures of the rule; no published
// reference.
func TestStuckFamily(t *testing.T) {
	var names []string
	var prof []ChannelProfile
	for i := 1; i <= 24; i++ {
		n := fmt.Sprintf("net.sub%02d.valve", i)
		names = append(names, n)
		prof = append(prof, ChannelProfile{Channel: n, Frames: 10000, MaxFlat: 36, FlatTail: 5, Step: 2, Min: 30, Max: 70})
	}
	names = append(names, "net.header.flow")
	prof = append(prof, ChannelProfile{Channel: "net.header.flow", Frames: 10000, MaxFlat: 3, FlatTail: 0.5, Step: 0.001, Min: 35, Max: 45})
	first := func(s *Screen, frames int) map[string]int {
		got := map[string]int{}
		x := make([]float64, len(names))
		miss := make([]bool, len(names))
		var q []Quality
		for k := 1; k <= frames; k++ {
			for i := range x {
				x[i] = 40 + 2*float64((k+i)%5) // every valve moves but the first
			}
			x[0] = 52
			x[len(x)-1] = 40 // the flow frozen
			s.Step(x, miss)
			q = s.AppendQuality(q[:0])
			for _, c := range q {
				if _, ok := got[c.Channel]; !ok && c.Kind == QualityStuck {
					got[c.Channel] = k
				}
			}
		}
		return got
	}
	s := NewScreen("net", names, prof)
	if got := first(s, 70); got["net.sub01.valve"] != 0 {
		t.Errorf("valve held 70 frames among 24: stuck from frame %d, want not stuck", got["net.sub01.valve"])
	}
	got := first(NewScreen("net", names, prof), 80)
	if got["net.sub01.valve"] != 73 {
		t.Errorf("valve held 80 frames among 24: stuck from frame %d, want 73", got["net.sub01.valve"])
	}
	if got["net.header.flow"] != 3+StuckMargin+1 {
		t.Errorf("flow frozen: stuck from frame %d, want %d", got["net.header.flow"], 3+StuckMargin+1)
	}
	s = NewScreen("net", names, prof)
	for k := 1; k < 24; k++ {
		s.Skip(k, true)
	}
	if got := first(s, 60); got["net.sub01.valve"] != 57 {
		t.Errorf("the other valves left to another unit: stuck from frame %d, want 57", got["net.sub01.valve"])
	}
}
