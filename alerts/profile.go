package alerts

import (
	"fmt"
	"math"
)

// QualitySilent is the data-quality kind of a unit whose channels are all
// silent: every channel of the unit has had no reading for longer than the
// staleness limit (a gateway or its link down). It is one alert per unit;
// its Quality.Channel is the unit's name. It opens at once and closes with
// the first frame that carries a reading of the unit again.
const QualitySilent = "silent"

// Settings of the learned data-quality rules (design choices, tested in
// profile_test.go).
const (
	// StuckMargin: a profiled channel repeating a live value for more
	// than its normal longest flat run plus this many frames is stuck. The
	// margin keeps a sensor frozen at a live value within 20 frames of
	// the normal flat-run length while leaving room for a run a little
	// longer than the longest one in the normal log.
	StuckMargin = 15
	// RestRun: a value the channel sat at for at least this many frames in
	// a row in the normal log, at the bottom or top of its normal range
	// (a machine at rest reads 0, a closed valve 0 %), is a rest value:
	// sitting there is never "stuck".
	RestRun = 10
	// MaxLevels: a channel with at most this many distinct values in the
	// normal log is discrete (a status, a small count, a coarse reading):
	// it stays at one value for as long as the plant does, so it is
	// never "stuck".
	MaxLevels = 10
	// MaxRest bounds the rest values kept per channel.
	MaxRest = 4
	// StuckTailRuns: the tail of a channel's flat-run lengths is
	// estimated from its StuckTailRuns longest live runs in the normal
	// log (ChannelProfile.FlatTail).
	StuckTailRuns = 10
	// StuckTail: a live value is stuck once its flat run exceeds the
	// normal longest run by this many tail scales (when that is more than
	// StuckMargin). Under an exponential tail of scale β, runs beyond the
	// longest of n normal runs by m come about exp(−m/β) times per n runs
	// (peaks over a threshold with shape 0: Coles 2001, An Introduction to
	// Statistical Modeling of Extreme Values, ch. 4): at m = 4β about once
	// in 55 normal logs' worth of runs, about once a year for a week-long
	// normal log. A live analog sensor's runs are a frame or two (β < 1:
	// StuckMargin decides); a coarsely quantised reading held by its
	// controller has runs of tens of frames whose longest varies from day
	// to day by several β.
	StuckTail = 4
)

// ChannelProfile is what a normal log says about one channel's data
// quality; fit learns it (the engine's profile learner) and the model file
// carries it. The zero value (Frames 0) means "no profile": the channel is
// judged by the rules without a profile (a flat run of the tracker's
// FlatFrames is stuck, any missing frame counts towards the missing hold).
type ChannelProfile struct {
	Channel string `json:"channel"`
	// Frames observed (value present) and Missing frames in the normal log.
	Frames  int `json:"frames"`
	Missing int `json:"missing"`
	// MaxFlat is the longest run of consecutive frames holding exactly
	// the same value, away from the rest values (frames).
	MaxFlat int `json:"max_flat"`
	// Rest lists the values the channel sat flat at for RestRun frames or
	// more at the bottom or top of its normal range.
	Rest []float64 `json:"rest,omitempty"`
	// Levels is the number of distinct values when at most MaxLevels
	// (a discrete channel), else 0.
	Levels int `json:"levels"`
	// Step is the smallest non-zero change between consecutive values
	// (the quantisation of a quantised reading), 0 when it never changed.
	Step float64 `json:"step"`
	// Min and Max are the range of the normal log, in the channel's unit.
	Min float64 `json:"min"`
	Max float64 `json:"max"`
	// MaxGap is the longest run of consecutive missing frames (frames).
	MaxGap int `json:"max_gap"`
	// SpikeSize is the least departure of a reading from both its
	// neighbours that makes it a spike, in the channel's unit; SpikeMax
	// the most spikes the normal log had within SpikeSpanFrames frames
	// (SpikeSpan of plant time). SpikeSize 0: no spike rule (see
	// SpikeLearner).
	SpikeSize       float64 `json:"spike_size,omitempty"`
	SpikeMax        int     `json:"spike_max,omitempty"`
	SpikeSpanFrames int     `json:"spike_span_frames,omitempty"`
	// FlatTail is the scale β of the exponential tail of the channel's
	// live flat-run lengths (frames; see FlatTailScale), 0 when unknown
	// (fewer than StuckTailRuns+1 runs, or a model file from before it).
	FlatTail float64 `json:"flat_tail,omitempty"`
	// Autocorr is the channel's sample autocorrelation at lags 1, 2, 4,
	// … frames (tracker.SerialLag), up to the longest lag the normal log
	// held often enough; nil when unknown (a model file from before it).
	// The model's correlation shrinkage (model.shrink) reads it.
	Autocorr []float64 `json:"autocorr,omitempty"`
	// LevelStepMax is the largest level step of the channel's residual
	// given the others over the later half of the normal log, in standard
	// deviations of that residual (tracker.LevelStepsTo); 0 when unknown
	// (no level steps, or a model file from before them): no level-shift
	// rule for the channel.
	LevelStepMax float64 `json:"level_step_max,omitempty"`
}

// MaxAutocorrLags bounds ChannelProfile.Autocorr.
const MaxAutocorrLags = 32

// FlatTailScale returns the exponential tail scale of run lengths from
// top, the longest runs longest first: with the k = len(top) − 1 longest
// over the threshold u = top[k], the maximum-likelihood scale of their
// excesses, β̂ = (1/k)·Σᵢ₌₁ᵏ (top[i−1] − u) (the exponential, shape 0,
// case of the peaks-over-threshold model: Coles 2001, ch. 4). It returns 0
// when top holds fewer than StuckTailRuns+1 runs.
func FlatTailScale(top []int) float64 {
	k := len(top) - 1
	if k < StuckTailRuns {
		return 0
	}
	s := 0.0
	for _, n := range top[:k] {
		s += float64(n - top[k])
	}
	return s / float64(k)
}

// StuckAfter returns the flat-run length (frames) beyond which a live
// value of the channel is stuck when it is judged alone: its normal
// longest run MaxFlat plus the larger of StuckMargin and StuckTail tail
// scales (FlatTail); StuckAfterOf(1). In a screen the unit's channels
// judged by a flat-run tail widen it (stuckfamily.go).
func (p *ChannelProfile) StuckAfter() int { return p.StuckAfterOf(1) }

// maxProfileRun bounds the run lengths of a profile read from a model
// file (about 68 years of one-second frames), so that the stuck threshold
// MaxFlat + StuckTail·FlatTail cannot overflow.
const maxProfileRun = math.MaxInt32

// Check reports, naming the field, what in a profile read from a model
// file cannot have come from fit and would make the screen judge the
// channel wrongly (nil: nothing): a negative count or run, a run or tail
// scale beyond maxProfileRun (the stuck threshold would overflow and hold
// every value stuck), more than MaxLevels levels or MaxRest rest values,
// a negative or non-finite step, spike size or tail scale, and a spike
// count beyond MaxSpikeCount (a negative one would hold the channel
// spiky on every frame).
func (p *ChannelProfile) Check() error {
	ints := []struct {
		name string
		v    int
	}{{"frames", p.Frames}, {"missing", p.Missing}, {"max_flat", p.MaxFlat}, {"max_gap", p.MaxGap},
		{"levels", p.Levels}, {"spike_max", p.SpikeMax}, {"spike_span_frames", p.SpikeSpanFrames}}
	for _, f := range ints {
		if f.v < 0 {
			return fmt.Errorf("%s %d is negative", f.name, f.v)
		}
	}
	for _, f := range ints[2:4] {
		if f.v > maxProfileRun {
			return fmt.Errorf("%s %d is more than %d frames", f.name, f.v, maxProfileRun)
		}
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"step", p.Step}, {"spike_size", p.SpikeSize}, {"flat_tail", p.FlatTail}, {"level_step_max", p.LevelStepMax}} {
		if !(f.v >= 0) || math.IsInf(f.v, 0) {
			return fmt.Errorf("%s %g is not a finite non-negative number", f.name, f.v)
		}
	}
	if len(p.Autocorr) > MaxAutocorrLags {
		return fmt.Errorf("%d autocorrelation lags, at most %d", len(p.Autocorr), MaxAutocorrLags)
	}
	for i, v := range p.Autocorr {
		if !(v >= -1 && v <= 1) {
			return fmt.Errorf("autocorr[%d] %g is not a correlation", i, v)
		}
	}
	switch {
	case p.FlatTail > maxProfileRun:
		return fmt.Errorf("flat_tail %g is more than %d frames", p.FlatTail, maxProfileRun)
	case p.Levels > MaxLevels:
		return fmt.Errorf("levels %d is more than %d", p.Levels, MaxLevels)
	case len(p.Rest) > MaxRest:
		return fmt.Errorf("%d rest values, at most %d", len(p.Rest), MaxRest)
	case p.SpikeMax > MaxSpikeCount:
		return fmt.Errorf("spike_max %d is more than %d", p.SpikeMax, MaxSpikeCount)
	}
	return nil
}

// MissingRate is the share of the normal log's frames in which the channel
// was missing.
func (p *ChannelProfile) MissingRate() float64 {
	if n := p.Frames + p.Missing; n > 0 {
		return float64(p.Missing) / float64(n)
	}
	return 0
}

// Discrete reports whether the channel had at most MaxLevels distinct
// values in the normal log.
func (p *ChannelProfile) Discrete() bool { return p.Levels > 0 }

// isRest reports whether v is one of the channel's rest values.
func (p *ChannelProfile) isRest(v float64) bool {
	for _, r := range p.Rest {
		if v == r {
			return true
		}
	}
	return false
}

// outOfRange reports whether v lies beyond the normal range by more than
// the margin m = max(Max − Min, 0.1·max(|Min|, |Max|), Step): a reading no
// normal variation explains (a sensor failed to full scale, a sign or
// unit error). A channel that was constant at 0 has no margin and no
// range rule.
func (p *ChannelProfile) outOfRange(v float64) bool {
	m := math.Max(p.Max-p.Min, math.Max(0.1*math.Max(math.Abs(p.Min), math.Abs(p.Max)), p.Step))
	if !(m > 0) {
		return false
	}
	return v < p.Min-m || v > p.Max+m
}

// Screen applies the data-quality rules of one unit frame by frame: it
// tracks each channel's current flat run and missing run and judges them
// against the channel's profile. Build it with [NewScreen], widen it with
// [Screen.Grow], feed each frame with [Screen.Step]. It allocates nothing
// per frame.
type Screen struct {
	unit  string
	names []string
	prof  []ChannelProfile
	last  []float64
	flat  []int
	gap   []int
	skip  []bool // channels judged elsewhere (context channels of other units)
	spk   []spikeTrack
	// tailM is the stuck rule's margin in tail scales for the unit's
	// channels judged by a flat-run tail (stuckScales of tailedChannels;
	// StuckAfterOf), kept up to date by Grow and Skip.
	tailM float64
	frame int64 // frames stepped
	// silent: every channel missing in the last Step.
	silent bool
	// lvl holds the channels' level steps of the last frame when lvlOK
	// (SetLevelSteps); status: a discrete channel changed its value in
	// the last Step (StatusChanged).
	lvl     []float64
	lvlOK   bool
	lvlSpan int64
	status  bool
	// cond is, per channel, the last frame with a condition or a missing
	// reading, and anyCond the last frame with a condition of any channel
	// (SetLevelSteps); far in the past before any.
	cond    []int64
	qcond   []int64 // per channel, the last frame with a data-quality condition
	anyCond int64
}

// NewScreen returns the screen of unit over channels names, each judged by
// the profile of the same channel name in prof (none: no profile).
func NewScreen(unit string, names []string, prof []ChannelProfile) *Screen {
	s := &Screen{unit: unit, anyCond: math.MinInt32}
	s.Grow(names, prof)
	return s
}

// Grow adds the channels of names beyond those the screen has (names must
// extend the screen's channel list), with their profiles from prof.
func (s *Screen) Grow(names []string, prof []ChannelProfile) {
	for _, n := range names[len(s.names):] {
		var cp ChannelProfile
		for i := range prof {
			if prof[i].Channel == n {
				cp = prof[i]
				break
			}
		}
		s.names = append(s.names, n)
		s.prof = append(s.prof, cp)
		s.last = append(s.last, math.NaN())
		s.flat = append(s.flat, 0)
		s.gap = append(s.gap, 0)
		s.skip = append(s.skip, false)
		s.spk = append(s.spk, spikeTrack{})
		s.lvl = append(s.lvl, 0)
		s.cond = append(s.cond, math.MinInt32)
		s.qcond = append(s.qcond, math.MinInt32)
	}
	s.lvlOK = false
	s.tailM = stuckScales(s.tailedChannels())
}

// Skip sets whether channel k is left to another unit's rules (a context
// channel: a driver from another unit, judged there): it raises no
// condition here and does not count for the unit's silence.
func (s *Screen) Skip(k int, skip bool) {
	s.skip[k] = skip
	s.tailM = stuckScales(s.tailedChannels())
}

// Len returns the number of channels.
func (s *Screen) Len() int { return len(s.names) }

// Profiles returns the channels' profiles (zero where none), in channel
// order. The slice is the screen's own.
func (s *Screen) Profiles() []ChannelProfile { return s.prof }

// Profiled reports whether channel k has a learned profile (or is left to
// another unit's rules, see Skip): the rules without a profile do not
// apply to it.
func (s *Screen) Profiled(k int) bool { return s.prof[k].Frames > 0 || s.skip[k] }

// Step advances the runs by one frame: x holds the values (in the
// screen's channel order) and miss the missing flags.
func (s *Screen) Step(x []float64, miss []bool) {
	s.silent = len(x) > 0
	s.status = false
	s.frame++
	for k, v := range x {
		if p := &s.prof[k]; p.SpikeSize > 0 {
			s.spk[k].step(v, !miss[k], s.frame, p.SpikeSize)
		}
		if miss[k] || v != v {
			s.gap[k]++
			s.cond[k] = s.frame
			continue // a flat run goes on over a gap: a frozen sensor may also drop out
		}
		if !s.skip[k] {
			s.silent = false
		}
		s.gap[k] = 0
		if v == s.last[k] {
			s.flat[k]++
		} else {
			if !s.skip[k] && s.prof[k].Discrete() && s.last[k] == s.last[k] {
				s.status = true
			}
			s.last[k], s.flat[k] = v, 1
		}
	}
}

// Silent reports whether every channel was missing in the last frame.
func (s *Screen) Silent() bool { return s.silent }

// MissingAlarm reports whether channel k, missing in the last frame, is
// missing for longer than the normal log ever saw (its MaxGap), so that
// its missing rule counts this frame. A channel without profile: always.
func (s *Screen) MissingAlarm(k int) bool {
	p := &s.prof[k]
	return !s.skip[k] && (p.Frames == 0 || s.gap[k] > p.MaxGap)
}

// AppendQuality appends to dst the conditions of the last frame that the
// profiles decide, and returns it:
//
//	silent        every channel missing (one condition, Channel = unit)
//	stuck         a profiled channel, not discrete, repeating a value that
//	              is not one of its rest values for more than
//	              StuckAfterOf frames (the unit's tail-judged channels)
//	out_of_range  a profiled channel, not discrete, beyond its normal
//	              range by more than the range's width (see ChannelProfile);
//	              a status taking a value its normal log never had is a
//	              change of state, not a failed sensor
//	spikes        a profiled channel with a spike rule (SpikeSize > 0)
//	              that had more than SpikeMax + SpikeMargin one-frame
//	              spikes in the last SpikeSpanFrames frames, and more than
//	              a quarter of that in the last quarter of the span
//	level_shift   the channel, not discrete, with the unit's largest level
//	              step (SetLevelSteps), when it has a reading and that step
//	              exceeds LevelShiftFactor times its profile's LevelStepMax
//
// Channels without a profile add nothing here: the caller applies the
// rules without a profile to them.
func (s *Screen) AppendQuality(dst []Quality) []Quality {
	if s.silent {
		return append(dst, Quality{Channel: s.unit, Kind: QualitySilent})
	}
	for k := range s.prof {
		p := &s.prof[k]
		if p.Frames == 0 || s.skip[k] {
			continue
		}
		n0 := len(dst)
		if p.SpikeSize > 0 && s.spk[k].inAlarm(s.frame, p.SpikeSpanFrames, p.SpikeMax) {
			dst = append(dst, Quality{Channel: s.names[k], Kind: QualitySpikes})
		}
		if s.gap[k] > 0 {
			continue
		}
		v := s.last[k]
		if !p.Discrete() && s.flat[k] > p.stuckAfterScales(s.tailM) && !p.isRest(v) {
			dst = append(dst, Quality{Channel: s.names[k], Kind: QualityStuck})
		}
		if !p.Discrete() && p.outOfRange(v) {
			dst = append(dst, Quality{Channel: s.names[k], Kind: QualityOutOfRange})
		}
		if len(dst) > n0 {
			s.cond[k], s.qcond[k], s.anyCond = s.frame, s.frame, s.frame
		}
	}
	if k, v, lim := s.levelShift(); k >= 0 {
		dst = append(dst, Quality{Channel: s.names[k], Kind: QualityLevelShift, Value: v, Limit: lim})
	}
	return dst
}
