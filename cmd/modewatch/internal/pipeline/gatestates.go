package pipeline

import (
	"math"
	"slices"
	"time"

	"modewatch/tracker"
)

// Status channels found by fit. A unit that names no state channel (and
// not state: none) is fitted as one model while fit keeps its frames, as
// for found states; at the end fit looks for a clear status channel among
// the unit's own: a channel with 2 … gateMaxLevels integer values, each
// held for long runs and present long enough to learn a model, in one of
// whose values at least one other channel of the unit rests (holds one
// exact value in gateRestShare of its frames) while it moves in another
// (a stopped machine's speed while its running flag reads 0). The unit is
// then learned again by that channel's values, as with units[].state
// naming it: one model per state, the transition hold-off learned, and a
// start or stop of the machine no longer scored by the one model of both.
// The channel with the most such resting channels wins.

const (
	// gateMaxLevels bounds the distinct values of a status channel.
	gateMaxLevels = 4
	// gateMinRun is the shortest mean run of one value (frames): a status
	// that flips faster is no operating state.
	gateMinRun = 60
	// gateRestShare: a channel rests in a state when it holds one value in
	// this share of the state's frames where it is present.
	gateRestShare = 0.98
	// gateMinShare: each state holds at least this share of the frames.
	gateMinShare = 0.05
)

// gateScreen follows, frame by frame, which channels of a unit can still
// be a status channel (integer values, at most gateMaxLevels of them), so
// that fit keeps no frames of a unit that has none.
type gateScreen struct {
	levels [][]float64
	out    []bool // no longer a candidate
}

// screen takes one frame and reports whether any channel is still a
// candidate.
func (g *gateScreen) screen(x []float64, miss []bool) bool {
	if len(g.levels) != len(x) {
		g.levels, g.out = make([][]float64, len(x)), make([]bool, len(x)) // channels changed: start again
	}
	alive := false
	for c, v := range x {
		if g.out[c] {
			continue
		}
		switch {
		case miss[c] || slices.Contains(g.levels[c], v):
		case v != math.Trunc(v) || math.IsInf(v, 0) || len(g.levels[c]) == gateMaxLevels:
			g.out[c] = true
			continue
		default:
			g.levels[c] = append(g.levels[c], v)
		}
		alive = true
	}
	return alive
}

// wantsGateStates reports whether fit should look for a status channel of
// unit name: no state configured (state: none turns it off).
func (p *Pipeline) wantsGateStates(name string) bool {
	i := p.cfg.Unit(name)
	return p.opt.Fit && (i < 0 || p.cfg.Units[i].State == "")
}

// findGateStates picks a clear status channel from the kept frames and,
// when there is one, learns them again by its values. It returns the
// channel's name ("" when none is clear).
func (u *Unit) findGateStates() string {
	b := u.autoBuf
	u.autoBuf = nil
	if b == nil || b.p != u.tr.P() || b.p < 2 {
		return ""
	}
	n, p := b.frames(), b.p
	warm := u.tr.Config().WarmUp
	best, bestRest := -1, 0
	for c := 0; c < p; c++ {
		if u.isContext(c) {
			continue
		}
		lv, ok := gateLevels(b, c, n, warm)
		if !ok {
			continue
		}
		rest := 0
		for d := 0; d < p; d++ {
			if d != c && !u.isContext(d) && gateRests(b, c, d, n, lv) {
				rest++
			}
		}
		if rest > bestRest {
			best, bestRest = c, rest
		}
	}
	if best < 0 {
		return ""
	}
	s := newStates(u.names[best], nil)
	s.noWindows = b.stride > 1
	u.states = s
	for f := 0; f < n; f++ {
		copy(u.x, b.x[f*p:(f+1)*p])
		copy(u.miss, b.miss[f*p:(f+1)*p])
		key, ok := 0.0, false
		if !u.miss[best] {
			key, ok = tracker.StateKey(u.x[best], nil)
		}
		if !u.enterKey(key, ok, time.Time{}) {
			continue
		}
		if err := u.tr.Step(&u.score, u.x, u.miss); err == nil {
			s.models[s.cur].frames++
		}
	}
	return u.names[best]
}

// gateLevels returns the values of channel c when it is a status channel:
// 2 … gateMaxLevels integer values, each in at least gateMinShare of the
// frames and twice the warm-up, held for gateMinRun frames on average.
func gateLevels(b *autoBuffer, c, n, warm int) ([]float64, bool) {
	var lv []float64
	var cnt []int
	changes, prev, have := 0, 0.0, false
	for f := 0; f < n; f++ {
		if b.miss[f*b.p+c] {
			continue
		}
		v := b.x[f*b.p+c]
		if v != math.Trunc(v) || math.IsInf(v, 0) {
			return nil, false
		}
		i := slices.Index(lv, v)
		if i < 0 {
			if len(lv) == gateMaxLevels {
				return nil, false
			}
			lv, cnt = append(lv, v), append(cnt, 0)
			i = len(lv) - 1
		}
		cnt[i]++
		if have && v != prev {
			changes++
		}
		prev, have = v, true
	}
	if len(lv) < 2 || changes == 0 {
		return nil, false
	}
	total := 0
	for _, k := range cnt {
		total += k
	}
	for _, k := range cnt {
		if float64(k) < gateMinShare*float64(total) || k*b.stride < 2*warm {
			return nil, false
		}
	}
	return lv, total/(changes+1)*b.stride >= gateMinRun
}

// gateRests reports whether channel d rests in one value of status c (one
// exact value in gateRestShare of the frames where both are present) and
// moves in another.
func gateRests(b *autoBuffer, c, d, n int, lv []float64) bool {
	rests, moves := false, false
	for _, v := range lv {
		// The most frequent value of d in state v (Boyer–Moore majority
		// vote), then its share.
		var cand float64
		votes, tot := 0, 0
		for f := 0; f < n; f++ {
			i := f * b.p
			if b.miss[i+c] || b.miss[i+d] || b.x[i+c] != v {
				continue
			}
			tot++
			switch x := b.x[i+d]; {
			case votes == 0:
				cand, votes = x, 1
			case x == cand:
				votes++
			default:
				votes--
			}
		}
		if tot == 0 {
			continue
		}
		same := 0
		for f := 0; f < n; f++ {
			i := f * b.p
			if !b.miss[i+c] && !b.miss[i+d] && b.x[i+c] == v && b.x[i+d] == cand {
				same++
			}
		}
		if float64(same) >= gateRestShare*float64(tot) {
			rests = true
		} else {
			moves = true
		}
	}
	return rests && moves
}
