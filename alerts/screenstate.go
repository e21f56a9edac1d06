package alerts

import (
	"fmt"
	"math"
)

// ChannelRun is the running state of one channel in a [Screen], as a
// checkpoint carries it so that a restart judges the channel as an
// uninterrupted run would: its current flat run (the stuck rule), its
// current missing run (the missing hold) and its recent readings and
// spikes (the spike rule). Counts are in frames.
type ChannelRun struct {
	Channel string `json:"channel"`
	// Value is the value the channel has held for the last Flat frames
	// with a reading (Flat 0: no reading yet, Value unused), in the
	// channel's unit.
	Value float64 `json:"value,omitempty"`
	Flat  int     `json:"flat,omitempty"`
	// Gap is the number of consecutive frames, up to the last, in which
	// the channel was missing.
	Gap int `json:"gap,omitempty"`
	// Recent holds the readings of the last frames, oldest first, while
	// they are consecutive (at most 2: the neighbours the spike test
	// needs); a missing frame empties it.
	Recent []float64 `json:"recent,omitempty"`
	// Spikes holds the age in frames of each spike remembered (at most
	// MaxSpikeCount), newest first: 1 is the frame before the last.
	Spikes []int64 `json:"spikes,omitempty"`
	// LevelHold and QualityHold are 1 + the age in frames of the
	// channel's last gap or data-quality condition and of its last
	// data-quality condition, while younger than MaxLevelHold (0: none
	// that recent): the level-shift rule waits for its windows to clear
	// of them (SetLevelSteps).
	LevelHold   int64 `json:"level_hold,omitempty"`
	QualityHold int64 `json:"quality_hold,omitempty"`
}

// MaxLevelHold bounds the ages ChannelRun carries for the level-shift
// rule: its two windows together span at most 2·360 frames
// (tracker.MaxLevelStepFrames; this package does not import the tracker,
// so pipeline's TestLevelHoldCoversWindows checks the two agree).
const MaxLevelHold = 2 * 360

// maxRecent is the number of readings the spike test looks back.
const maxRecent = 2

// AppendState appends to dst the running state of each channel of the
// screen that has any (a channel never seen and never missing is left
// out) and returns it. Values that are not finite are not carried (the
// screen never holds one; JSON cannot write one). It allocates: call it
// when a checkpoint is written, not per frame.
func (s *Screen) AppendState(dst []ChannelRun) []ChannelRun {
	for k, name := range s.names {
		r := ChannelRun{Channel: name, Gap: s.gap[k]}
		if v := s.last[k]; s.flat[k] > 0 && isFinite(v) {
			r.Value, r.Flat = v, s.flat[k]
		}
		t := &s.spk[k]
		if n := min(t.run, maxRecent); n > 0 {
			r.Recent = []float64{t.b, t.c}[maxRecent-n:]
			if !isFinite(r.Recent[0]) || !isFinite(r.Recent[len(r.Recent)-1]) {
				r.Recent = nil
			}
		}
		for i := 0; i < t.n; i++ {
			r.Spikes = append(r.Spikes, s.frame-t.spike(i))
		}
		if a := s.frame - s.cond[k]; a >= 0 && a < MaxLevelHold {
			r.LevelHold = a + 1
		}
		if a := s.frame - s.qcond[k]; a >= 0 && a < MaxLevelHold {
			r.QualityHold = a + 1
		}
		if r.Flat > 0 || r.Gap > 0 || len(r.Recent) > 0 || len(r.Spikes) > 0 || r.LevelHold > 0 || r.QualityHold > 0 {
			dst = append(dst, r)
		}
	}
	return dst
}

// SetState replaces the running state of the screen's channels by runs
// (as AppendState wrote them): a channel not listed starts empty (no flat
// run, no missing run, no spikes), as a channel of a checkpoint written
// before the state was carried does. It refuses, naming the entry and
// leaving the screen unchanged, a channel the screen does not have or
// listed twice, a negative count, more than 2 recent readings or
// MaxSpikeCount spikes, spike ages not positive and ascending, and values
// that are not finite.
func (s *Screen) SetState(runs []ChannelRun) error {
	idx := make(map[string]int, len(s.names))
	for k, n := range s.names {
		idx[n] = k
	}
	seen := make([]bool, len(s.names))
	for i := range runs {
		r := &runs[i]
		k, ok := idx[r.Channel]
		if !ok {
			return fmt.Errorf("%w: screen state %d: channel %.64q is not one of unit %.64q's", ErrInput, i, r.Channel, s.unit)
		}
		if seen[k] {
			return fmt.Errorf("%w: screen state %d: channel %.64q listed twice", ErrInput, i, r.Channel)
		}
		seen[k] = true
		if why := r.problem(); why != "" {
			return fmt.Errorf("%w: screen state %d (channel %.64q): %s", ErrInput, i, r.Channel, why)
		}
	}
	for k := range s.names {
		s.last[k], s.flat[k], s.gap[k], s.spk[k] = math.NaN(), 0, 0, spikeTrack{}
		s.cond[k], s.qcond[k] = math.MinInt32, math.MinInt32
	}
	s.anyCond = math.MinInt32
	for i := range runs {
		r := &runs[i]
		k := idx[r.Channel]
		if r.Flat > 0 {
			s.last[k], s.flat[k] = r.Value, r.Flat
		}
		s.gap[k] = r.Gap
		if r.LevelHold > 0 {
			s.cond[k] = s.frame - (r.LevelHold - 1)
		}
		if r.QualityHold > 0 {
			s.qcond[k] = s.frame - (r.QualityHold - 1)
			s.anyCond = max(s.anyCond, s.qcond[k])
		}
		t := &s.spk[k]
		t.run = len(r.Recent)
		switch t.run {
		case 1:
			t.c = r.Recent[0]
		case 2:
			t.b, t.c = r.Recent[0], r.Recent[1]
		}
		// oldest first into the ring, so that the newest is before head
		for j := len(r.Spikes) - 1; j >= 0; j-- {
			t.ring[t.head] = s.frame - r.Spikes[j]
			t.head = (t.head + 1) % MaxSpikeCount
			t.n++
		}
	}
	return nil
}

// problem checks one channel's run against the bounds SetState states
// and says what is wrong ("": nothing).
func (r *ChannelRun) problem() string {
	switch {
	case r.Flat < 0 || r.Gap < 0:
		return fmt.Sprintf("negative run (flat %d, gap %d)", r.Flat, r.Gap)
	case !isFinite(r.Value):
		return "value not finite"
	case len(r.Recent) > maxRecent:
		return fmt.Sprintf("%d recent readings (at most %d)", len(r.Recent), maxRecent)
	case len(r.Spikes) > MaxSpikeCount:
		return fmt.Sprintf("%d spikes (at most %d)", len(r.Spikes), MaxSpikeCount)
	case r.LevelHold < 0 || r.LevelHold > MaxLevelHold || r.QualityHold < 0 || r.QualityHold > MaxLevelHold:
		return fmt.Sprintf("level-shift holds %d and %d (0 to %d)", r.LevelHold, r.QualityHold, MaxLevelHold)
	}
	for _, v := range r.Recent {
		if !isFinite(v) {
			return "recent reading not finite"
		}
	}
	prev := int64(0)
	for _, a := range r.Spikes {
		if a <= prev {
			return fmt.Sprintf("spike ages %v not positive and ascending", r.Spikes)
		}
		prev = a
	}
	return ""
}

func isFinite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
