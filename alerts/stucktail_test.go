package alerts

import "testing"

// TestFlatTailScale: the exponential tail scale of the longest runs, by
// hand: the 10 longest over the 11th (u = 24) exceed it by
// 12+10+9+6+5+4+4+3+2+1 = 56 frames, β̂ = 56/10 = 5.6 (the maximum-
// likelihood scale of exponential excesses; Coles 2001, ch. 4). Fewer
// than StuckTailRuns+1 runs give 0 (unknown).
func TestFlatTailScale(t *testing.T) {
	top := []int{36, 34, 33, 30, 29, 28, 28, 27, 26, 25, 24}
	if got := FlatTailScale(top); got != 5.6 {
		t.Errorf("FlatTailScale(%v) = %v, want 5.6", top, got)
	}
	if got := FlatTailScale(top[:10]); got != 0 {
		t.Errorf("FlatTailScale of 10 runs = %v, want 0", got)
	}
	for _, c := range []struct {
		p    ChannelProfile
		want int
	}{
		{ChannelProfile{MaxFlat: 36, FlatTail: 5.6}, 36 + 23}, // ⌈4·5.6⌉ = 23 > StuckMargin
		{ChannelProfile{MaxFlat: 36, FlatTail: 0.8}, 36 + StuckMargin},
		{ChannelProfile{MaxFlat: 3}, 3 + StuckMargin}, // a profile from before FlatTail
	} {
		if got := c.p.StuckAfter(); got != c.want {
			t.Errorf("StuckAfter(max flat %d, tail %v) = %d, want %d", c.p.MaxFlat, c.p.FlatTail, got, c.want)
		}
	}
}

// TestStuckQuantisedHeld: a valve position quantised to 2 % whose
// controller holds it at one step for up to 36 frames in the normal log
// (tail scale 5 frames) is not stuck when held 53 frames (a slow day),
// and is stuck past 36 + 4·5 = 56 frames; a live analog reading (longest
// normal run 3 frames, tail scale 0.5) frozen at a live value is stuck
// within 20 frames of its normal longest run (issue target), as before
// the tail rule. Design figures of the rule (StuckTail, StuckMargin); no
// published reference.
func TestStuckQuantisedHeld(t *testing.T) {
	prof := []ChannelProfile{
		{Channel: "u.valve", Frames: 10000, MaxFlat: 36, FlatTail: 5, Step: 2, Min: 30, Max: 70},
		{Channel: "u.flow", Frames: 10000, MaxFlat: 3, FlatTail: 0.5, Step: 0.001, Min: 35, Max: 45},
	}
	names := []string{"u.valve", "u.flow"}
	// first returns the frame at which ch's stuck condition first shows
	// when the valve holds 52 % and flow holds 40 (frozen: true) or moves.
	first := func(frozen bool, frames int) map[string]int {
		s := NewScreen("u", names, prof)
		got := map[string]int{}
		var q []Quality
		for k := 1; k <= frames; k++ {
			flow := 40.0
			if !frozen {
				flow += 0.001 * float64(k%7)
			}
			s.Step([]float64{52, flow}, []bool{false, false})
			q = s.AppendQuality(q[:0])
			for _, c := range q {
				if _, ok := got[c.Channel]; !ok && c.Kind == QualityStuck {
					got[c.Channel] = k
				}
			}
		}
		return got
	}
	if got := first(false, 53); len(got) != 0 {
		t.Errorf("valve held 53 frames (normal longest 36, tail 5): stuck at %v, want none", got)
	}
	if got := first(false, 60); got["u.valve"] != 57 {
		t.Errorf("valve held 60 frames: stuck from frame %d, want 57 (past 36 + 4·5)", got["u.valve"])
	}
	got := first(true, 40)
	if k, ok := got["u.flow"]; !ok || k > 3+20 {
		t.Errorf("flow frozen: stuck from frame %d (found %v), want within 20 frames of its normal longest run 3", k, ok)
	}
	if got["u.flow"] != 3+StuckMargin+1 {
		t.Errorf("flow frozen: stuck from frame %d, want %d (StuckMargin decides for a live reading)", got["u.flow"], 3+StuckMargin+1)
	}
}
