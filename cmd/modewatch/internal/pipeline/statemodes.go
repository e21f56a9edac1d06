package pipeline

import (
	"math"

	"modewatch/tracker"
)

// Shared mode count of a unit's operating states. Each state's model
// counts its modes by the Share rule (model.modes auto:SHARE) on its own
// correlation matrix. Where one machine dominates a state's variance (two
// duty pumps moving together while the swing pump stands still), the rule
// reaches its share after a few modes, and the channels the state does not
// move (the river's temperature, turbidity and conductivity at a raw-water
// intake) are left in that state's residual while the other state keeps
// them in its modes. Their slow normal wander then raises SPE in one state
// only: the first frame after the machine stops alerts, led by channels
// the machine does not drive. So fit learns each state's automatic count
// and, when the richest state has at least twice the modes of the poorest
// (stateModesRatio) and some channel is one the states do not move
// (the same mean and spread in each: unmovedChannels), gives every state
// the largest of them as the floor of its Share rule
// (modes.Config.MinCount; still within max_modes and the residual cap, so
// each state keeps a residual). The floor is saved with the states
// (StatesFile.MinModes) and holds for every later refresh, and for a state
// first seen online.

const (
	// unmovedMean and unmovedSpread: a channel is one the states do not
	// move when its mean differs between any two fitted states by at most
	// unmovedMean of its (pooled) standard deviation and its variance by
	// at most a factor unmovedSpread.
	unmovedMean   = 0.5
	unmovedSpread = 2.0
	// stateModesRatio: the floor is set only when the richest state has at
	// least this many times the modes of the poorest (10 against 3 on the
	// water works' raw-water unit). A difference of a mode or so is the
	// Share rule landing either side of its share; on the suite, flooring
	// the compressor station's boost (4 against 3) cost a detection.
	stateModesRatio = 2
)

// stateModesConfig applies the states' floor on the mode count to a state
// tracker's configuration (automatic count only).
func (u *Unit) stateModesConfig(cfg *tracker.Config) {
	if s := u.states; s != nil {
		floorModes(cfg, s.minModes)
	}
}

// floorModes sets the floor of cfg's automatic mode count (within its
// MaxCount); a fixed count or a floor of 0 leaves cfg as it is.
func floorModes(cfg *tracker.Config, floor int) {
	if floor <= 0 || cfg.Modes.Count != 0 {
		return
	}
	cfg.Modes.MinCount = floor
	if cfg.Modes.MaxCount > 0 {
		cfg.Modes.MinCount = min(floor, cfg.Modes.MaxCount)
	}
}

// alignStateModes (fit) reads the mode count of every state model with
// enough frames (from its latest refresh: a further refresh here would move
// the warm-started modes of units it leaves alone), takes the largest of
// their counts as the floor of all and rebuilds
// the modes of each state under it, when the counts differ by a factor
// stateModesRatio or more, unless the engine leaves each state its own
// count (Options.OwnStateModes). It reports the floor (0: none set).
func (u *Unit) alignStateModes() int {
	s := u.states
	if u.p.opt.OwnStateModes || s == nil || len(s.models) < 2 {
		return 0
	}
	warm := uint64(u.tr.Config().WarmUp)
	floor, least, n := 0, 0, 0
	for _, m := range s.models {
		if m.frames < warm || m.tr.Config().Modes.Count != 0 || m.tr.Modes().Count() == 0 {
			continue // no model yet, or a fixed count
		}
		c := m.tr.Modes().Count()
		if n == 0 || c < least {
			least = c
		}
		floor = max(floor, c)
		n++
	}
	if n < 2 || floor < stateModesRatio*least {
		return 0 // the states' counts are near enough: each keeps its own
	}
	if u.unmovedChannels(warm) == 0 {
		return 0 // every channel differs by state: each state's own structure
	}
	s.minModes = floor
	for _, m := range s.models {
		if m.frames < warm {
			continue
		}
		cfg := m.tr.Config()
		if cfg.Modes.Count != 0 {
			continue
		}
		u.stateModesConfig(&cfg)
		if err := m.tr.Grow(m.tr.P(), cfg); err != nil {
			u.p.log.Error("operating state's model cannot take the shared mode count", "unit", u.Name, "state", s.label(m.key), "err", err)
		}
	}
	return floor
}

// unmovedChannels counts the unit's channels that its fitted states (those
// with at least warm frames) do not move: the same mean and spread in each
// (unmovedMean, unmovedSpread; a channel at rest in a state moves). Only
// such channels are left in one state's residual by the Share rule while
// another state models them, so only a unit with one gets the floor; a
// unit whose states differ in every channel keeps each state's own count
// (its detection in a state is then that of a model of the state alone).
func (u *Unit) unmovedChannels(warm uint64) int {
	s := u.states
	var ms [][2][]float64 // per fitted state: means, variances
	for _, m := range s.models {
		if m.frames < warm {
			continue
		}
		p := m.tr.P()
		mv := [2][]float64{make([]float64, p), make([]float64, p)}
		m.tr.Stats().MeanTo(mv[0])
		m.tr.Stats().VarTo(mv[1])
		ms = append(ms, mv)
	}
	if len(ms) < 2 {
		return 0
	}
	n := 0
	for i := range ms[0][0] {
		if u.isContext(i) {
			continue
		}
		same := true
		for a := 0; a < len(ms) && same; a++ {
			for b := a + 1; b < len(ms) && same; b++ {
				if i >= len(ms[a][0]) || i >= len(ms[b][0]) {
					same = false
					break
				}
				va, vb := ms[a][1][i], ms[b][1][i]
				same = va > 0 && vb > 0 && va <= unmovedSpread*vb && vb <= unmovedSpread*va &&
					math.Abs(ms[a][0][i]-ms[b][0][i]) <= unmovedMean*math.Sqrt((va+vb)/2)
			}
		}
		if same {
			n++
		}
	}
	return n
}
