package alerts

import "math"

// QualityLevelShift is the kind of a channel whose reading shifted against
// its relations to the other channels of its unit: its residual given the
// others (the model's conditional residual) stepped between two adjacent
// windows by more than LevelShiftFactor times the most the normal log
// showed (a transmitter's calibration shift, a bias that stays inside the
// channel's normal range; tracker.LevelStepsTo).
const QualityLevelShift = "level_shift"

// LevelShiftFactor: a channel's level step is a shift when it exceeds
// this multiple of the largest step its normal log showed
// (ChannelProfile.LevelStepMax). A design choice, measured on the realism
// suite (README, Validation): at 1.2 the suite's plants gave two to five
// times the false alerts of 1.5 in a first trial on five seeds.
const LevelShiftFactor = 1.5

// SetLevelSteps gives the screen each channel's level step of the frame
// last stepped (s in the screen's channel order, in standard deviations
// of the channel's conditional residual; tracker.LevelStepsTo), ok false
// when there are none (the window ring not yet full), and span, the
// frames of the two windows together: a channel with a missing reading
// within the last span frames is not judged, since its return to a live
// reading steps its residual, and no channel is judged while a channel of
// the unit had a data-quality condition (stuck, out of range, spikes)
// within them, since every residual given the others carries the flagged
// reading (a frozen transmitter moves its neighbours' residuals as the
// plant moves, and its return steps them). The values are copied.
func (s *Screen) SetLevelSteps(v []float64, ok bool, span int) {
	s.lvlOK, s.lvlSpan = ok, int64(span)
	if ok {
		copy(s.lvl, v[:len(s.lvl)])
	}
}

// levelShift returns the channel whose level step of the last frame is a
// shift, or −1, with its |sᵢ| and its threshold (both 0 with no channel):
// the channel with the largest absolute step of the unit's judged
// channels (not discrete, not skipped), when that step exceeds its
// threshold, LevelShiftFactor times its profile's LevelStepMax. A step of one
// channel's reading by δ moves every channel's standardized conditional
// residual by Ωᵢⱼδ/√Ωᵢᵢ, and |Ωᵢⱼ| ≤ √(ΩᵢᵢΩⱼⱼ) for the positive definite Ω,
// so the shifted channel's own step, √Ωⱼⱼ·δ, is the largest (the
// reasoning of the reconstruction-based contribution's guarantee for one
// sensor's fault, Alcalá & Qin 2009): another channel over its own level
// is smeared by it and is not named.
func (s *Screen) levelShift() (k int, v, lim float64) {
	if !s.lvlOK {
		return -1, 0, 0
	}
	best, bi := 0.0, -1
	for k := range s.prof {
		if s.skip[k] || s.prof[k].Discrete() {
			continue
		}
		if a := math.Abs(s.lvl[k]); a > best {
			best, bi = a, k
		}
	}
	if bi < 0 || s.gap[bi] > 0 || s.prof[bi].Frames == 0 || s.frame-s.cond[bi] <= s.lvlSpan || s.frame-s.anyCond <= s.lvlSpan {
		return -1, 0, 0
	}
	if m := s.prof[bi].LevelStepMax; !(m > 0) || best <= LevelShiftFactor*m {
		return -1, 0, 0
	}
	return bi, best, LevelShiftFactor * s.prof[bi].LevelStepMax
}

// StatusChanged reports whether a discrete channel of the screen (a
// status: at most MaxLevels values in its normal log) changed its value
// in the last frame stepped: the relations of the unit before and after
// may differ (a machine started), so the level steps start again
// (tracker.ResetLevelSteps).
func (s *Screen) StatusChanged() bool { return s.status }
