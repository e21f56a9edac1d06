package alerts

import "math"

// The stuck rule over a unit's channels.
//
// StuckTail sets one channel's margin beyond its normal longest flat run:
// under an exponential tail of scale β, runs beyond it by m come about
// exp(−m/β) times per normal log's worth of runs. A unit of n channels
// whose runs have such a tail (a network of substation valves held on
// their 2 % steps by their controllers) meets n times as many, so a
// margin of β·(StuckTail + ln n) holds the unit's rate of false stuck
// conditions where StuckTail holds one channel's (the union bound over
// the unit's channels: P(any of n) ≤ n·exp(−m/β)). Only the channels whose
// margin the tail sets count (StuckTail·β over StuckMargin): where
// StuckMargin decides (a live analog sensor, β a frame or two), a run past
// it comes exp(−StuckMargin/β) times per log's worth, e^−7.5 at β 2 and
// less below, nothing beside a tail-set channel's e^−4. StuckMargin still
// bounds every margin from below.

// StuckAfterOf returns the flat-run length (frames) beyond which a live
// value of the channel is stuck, in a unit of n channels with a flat-run
// tail (n < 1 counts as 1): its normal longest run MaxFlat plus the larger
// of StuckMargin and (StuckTail + ln n) tail scales (FlatTail).
func (p *ChannelProfile) StuckAfterOf(n int) int { return p.stuckAfterScales(stuckScales(n)) }

// stuckScales returns the tail scales of the stuck margin in a unit of n
// channels with a flat-run tail: StuckTail + ln n (n < 1 counts as 1).
func stuckScales(n int) float64 {
	if n > 1 {
		return StuckTail + math.Log(float64(n))
	}
	return StuckTail
}

// stuckAfterScales returns MaxFlat plus the larger of StuckMargin and m
// tail scales: the screen keeps m for its unit (Screen.tailM), so that the
// per-frame test takes no logarithm.
func (p *ChannelProfile) stuckAfterScales(m float64) int {
	return p.MaxFlat + max(StuckMargin, int(math.Ceil(m*p.FlatTail)))
}

// tailedChannels returns how many channels of s the stuck rule judges by a
// flat-run tail: profiled, not discrete, not left to another unit, with a
// margin the tail sets (StuckTail·FlatTail over StuckMargin).
func (s *Screen) tailedChannels() int {
	n := 0
	for k := range s.prof {
		if p := &s.prof[k]; p.Frames > 0 && !s.skip[k] && !p.Discrete() && StuckTail*p.FlatTail > StuckMargin {
			n++
		}
	}
	return n
}
