package pipeline

import (
	"fmt"
	"math"
	"slices"
	"time"

	"modewatch/alerts"
)

// maxRestCandidates bounds the long flat runs remembered per channel while
// learning (the values a channel sat at for alerts.RestRun frames or more).
const maxRestCandidates = 16

// profiler learns the data-quality profile of a unit's channels from a
// normal log (fit): per channel its flat runs, rest values, distinct
// levels, quantisation step, range, missing runs and spikes
// (alerts.ChannelProfile).
type profiler struct {
	prof   []alerts.ChannelProfile
	last   []float64
	run    []int
	gap    []int
	rest   [][]restRun // long runs: value and its longest run
	levels [][]float64 // distinct values, up to alerts.MaxLevels+1
	seen   []bool      // a value was observed
	spikes []alerts.SpikeLearner
	period time.Duration // frame period (the spike rule's span in frames)
	// The longest flat runs, for the tail of their distribution
	// (alerts.ChannelProfile.FlatTail): short counts the runs of each
	// length below alerts.RestRun; other keeps the longest runs of values
	// beyond maxRestCandidates (rest holds those of the others).
	short [][alerts.RestRun]int
	other [][]int
	// serial learns each channel's autocorrelation (serial.go).
	serial []serialLearner
	// level learns the channels' normal level steps (levelprofile.go).
	level levelLearner
}

type restRun struct {
	v   float64
	n   int
	top []int // its longest runs, longest first (tailKeep)
}

// tailKeep is the number of longest runs kept per value: the runs the
// tail scale is estimated from, and the threshold below them.
const tailKeep = alerts.StuckTailRuns + 1

// keepLongest inserts run n into top (longest first), keeping at most
// tailKeep runs.
func keepLongest(top []int, n int) []int {
	i, _ := slices.BinarySearchFunc(top, n, func(a, b int) int { return b - a })
	if i >= tailKeep {
		return top
	}
	top = slices.Insert(top, i, n)
	if len(top) > tailKeep {
		top = top[:tailKeep]
	}
	return top
}

// grow adds the channels of names beyond those the profiler has.
func (pr *profiler) grow(names []string) {
	for _, n := range names[len(pr.prof):] {
		pr.prof = append(pr.prof, alerts.ChannelProfile{Channel: n, Min: math.Inf(1), Max: math.Inf(-1)})
		pr.last = append(pr.last, math.NaN())
		pr.run = append(pr.run, 0)
		pr.gap = append(pr.gap, 0)
		pr.rest = append(pr.rest, nil)
		pr.levels = append(pr.levels, nil)
		pr.seen = append(pr.seen, false)
		pr.spikes = append(pr.spikes, alerts.NewSpikeLearner(pr.period))
		pr.short = append(pr.short, [alerts.RestRun]int{})
		pr.other = append(pr.other, nil)
		pr.serial = append(pr.serial, serialLearner{})
	}
}

// add learns one frame (x in the unit's channel order, NaN or miss where
// missing).
func (pr *profiler) add(x []float64, miss []bool) {
	for k, v := range x {
		p := &pr.prof[k]
		pr.spikes[k].Add(v, !miss[k], p.Step)
		pr.serial[k].add(v, !miss[k])
		if miss[k] || v != v {
			p.Missing++
			pr.gap[k]++
			p.MaxGap = max(p.MaxGap, pr.gap[k])
			continue
		}
		pr.gap[k] = 0
		p.Frames++
		p.Min, p.Max = math.Min(p.Min, v), math.Max(p.Max, v)
		if pr.seen[k] && v == pr.last[k] {
			pr.run[k]++
			continue
		}
		if pr.seen[k] {
			if d := math.Abs(v - pr.last[k]); d > 0 && (p.Step == 0 || d < p.Step) {
				p.Step = d
			}
			pr.endRun(k)
		}
		pr.seen[k], pr.last[k], pr.run[k] = true, v, 1
		if l := pr.levels[k]; len(l) <= alerts.MaxLevels && !slices.Contains(l, v) {
			pr.levels[k] = append(l, v)
		}
	}
}

// endRun books the flat run of channel k that just ended.
func (pr *profiler) endRun(k int) {
	n, v := pr.run[k], pr.last[k]
	if n <= 0 {
		return
	}
	if n < alerts.RestRun {
		pr.prof[k].MaxFlat = max(pr.prof[k].MaxFlat, n)
		pr.short[k][n]++
		return
	}
	rs := pr.rest[k]
	if i := slices.IndexFunc(rs, func(r restRun) bool { return r.v == v }); i >= 0 {
		rs[i].n = max(rs[i].n, n)
		rs[i].top = keepLongest(rs[i].top, n)
		return
	}
	if len(rs) < maxRestCandidates {
		pr.rest[k] = append(rs, restRun{v, n, []int{n}})
		return
	}
	pr.prof[k].MaxFlat = max(pr.prof[k].MaxFlat, n) // too many long-run values to tell rest from live
	pr.other[k] = keepLongest(pr.other[k], n)
}

// flatTail returns the exponential tail scale of channel k's live flat
// runs (alerts.ChannelProfile.FlatTail) given its rest values: 0 when
// fewer than tailKeep runs were seen.
func (pr *profiler) flatTail(k int, rest []float64) float64 {
	var top []int
	add := func(n int) { top = keepLongest(top, n) }
	for _, r := range pr.rest[k] {
		if !slices.Contains(rest, r.v) {
			for _, n := range r.top {
				add(n)
			}
		}
	}
	for _, n := range pr.other[k] {
		add(n)
	}
	for n := alerts.RestRun - 1; n >= 1 && len(top) < tailKeep; n-- {
		for c := pr.short[k][n]; c > 0 && len(top) < tailKeep; c-- {
			add(n)
		}
	}
	return alerts.FlatTailScale(top)
}

// profiles finishes the open runs and returns the profiles of the channels
// observed at least once. A long run at a value that is not the bottom
// or top of the channel's normal range counts as a live flat run.
func (pr *profiler) profiles() []alerts.ChannelProfile {
	var out []alerts.ChannelProfile
	for k := range pr.prof {
		p := pr.prof[k]
		if p.Frames == 0 {
			continue
		}
		pr.endRun(k)
		pr.run[k] = 0
		rs := slices.Clone(pr.rest[k])
		slices.SortFunc(rs, func(a, b restRun) int { return b.n - a.n })
		p.Rest = nil
		for _, r := range rs {
			if (r.v == p.Min || r.v == p.Max) && len(p.Rest) < alerts.MaxRest {
				p.Rest = append(p.Rest, r.v)
			} else {
				p.MaxFlat = max(p.MaxFlat, r.n)
			}
		}
		if n := len(pr.levels[k]); n <= alerts.MaxLevels {
			p.Levels = n
		}
		pr.spikes[k].Profile(&p)
		p.FlatTail = pr.flatTail(k, p.Rest)
		p.Autocorr = pr.serial[k].autocorr()
		if p.Levels == 0 {
			p.LevelStepMax = pr.levelMax(k)
		}
		out = append(out, p)
	}
	return out
}

// screenFrame runs the unit's data-quality screen over the frame just
// read into u.x/u.miss (and, in fit, the profile learner). It allocates
// only when the unit's channels grew.
func (u *Unit) screenFrame() {
	if u.screen == nil {
		u.screen = alerts.NewScreen(u.Name, u.names, u.profile)
	} else if u.screen.Len() < len(u.names) {
		u.screen.Grow(u.names, u.profile)
	}
	for k := range u.ctx {
		u.screen.Skip(k, u.ctx[k])
	}
	p := len(u.names) // the channels; u.x holds lagged columns after them with model.lags
	u.screen.Step(u.x[:p], u.miss[:p])
	if u.p.opt.Fit {
		if u.learn == nil {
			u.learn = &profiler{period: u.p.opt.Period}
		}
		if len(u.learn.prof) < len(u.names) {
			u.learn.grow(u.names)
		}
		u.learn.add(u.x[:p], u.miss[:p])
	}
}

// observeSilent tells the alarm engine that every channel of the unit is
// missing in the frame at t: one silent condition, no statistics and no
// per-channel missing (the silent alert stands for them).
func (u *Unit) observeSilent(t time.Time) {
	o := &u.p.obs
	o.Unit, o.Time = u.Name, t
	o.ModelState = u.ModelState()
	o.Stats, o.Contributors, o.Missing = o.Stats[:0], o.Contributors[:0], o.Missing[:0]
	o.Quality = u.screen.AppendQuality(o.Quality[:0])
	if err := u.p.alerts.Observe(o); err != nil {
		u.p.log.Warn("alarm engine refused an observation", "unit", u.Name, "time", t, "err", err)
	}
}

// Profiles returns the unit's data-quality profiles: learned from the
// frames seen when fitting, else those of its model file (nil if none).
func (u *Unit) Profiles() []alerts.ChannelProfile {
	if u.learn != nil {
		return u.learn.profiles()
	}
	if u.screen != nil {
		var out []alerts.ChannelProfile
		for _, p := range u.screen.Profiles() {
			if p.Frames > 0 {
				out = append(out, p)
			}
		}
		return out
	}
	return slices.Clone(u.profile)
}

// screenState returns the running state of the unit's data-quality screen
// for its checkpoint (nil before the screen's first frame). Called under
// p.mu, between the same two frames as the tracker state.
func (u *Unit) screenState() []alerts.ChannelRun {
	if u.screen == nil {
		return nil
	}
	return u.screen.AppendState(nil)
}

// setScreen restores the running state of a unit checkpoint's screen
// (none: every run starts empty, as before checkpoints carried it). The
// screen is built here, over the model's channels and profiles, as the
// unit's first frame would build it; a state that does not fit the
// unit's channels is refused (alerts.Screen.SetState) and the unit is
// left without a screen.
func (u *Unit) setScreen(runs []alerts.ChannelRun) error {
	s := alerts.NewScreen(u.Name, u.names, u.profile)
	if err := s.SetState(runs); err != nil {
		return fmt.Errorf("%w: %w", ErrModelFile, err)
	}
	u.screen = s
	return nil
}
