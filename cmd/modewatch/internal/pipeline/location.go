package pipeline

import (
	"math"
	"slices"
	"sync"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker"
)

// Learning around incidents and incident locations: the engine's side.
//
// The alarm engine hands each unit the channels of its open, not accepted
// incidents (alerts.Masking); the unit learns every frame with those
// channels replaced by their reconstruction (tracker.StepMasked). The mask
// lives in a box per unit name, so that a mask handed over before the
// unit exists (a restored alarm snapshot) is not lost.

// maskBox holds one unit's mask as the alarm engine last set it.
type maskBox struct {
	mu       sync.Mutex
	ver      uint64
	ch       []string
	recentre []string // accepted channels whose current level becomes normal at the next frame
	move     bool     // a new operating point: every channel is taken in from the next frame (Move)
}

// masks maps unit names to their boxes.
type masks struct {
	mu sync.Mutex
	m  map[string]*maskBox
}

func (ms *masks) box(unit string) *maskBox {
	ms.mu.Lock()
	defer ms.mu.Unlock()
	if ms.m == nil {
		ms.m = map[string]*maskBox{}
	}
	b := ms.m[unit]
	if b == nil {
		b = &maskBox{}
		ms.m[unit] = b
	}
	return b
}

// Mask implements alerts.Masking: it stores the unit's mask for its next
// frame (called under the alarm engine's lock; it only copies).
func (l learning) Mask(unit string, channels []string) {
	if l.p.opt.Fit {
		return // fit learns from every frame of its (normal) input
	}
	b := l.p.masks.box(unit)
	b.mu.Lock()
	b.ch = append(b.ch[:0], channels...)
	b.ver++
	b.mu.Unlock()
}

// Accept implements alerts.Accepting: the unit's next frame recentres the
// channels on their current level (tracker.Recentre).
func (l learning) Accept(unit string, channels []string) {
	if l.p.opt.Fit {
		return
	}
	b := l.p.masks.box(unit)
	b.mu.Lock()
	b.recentre = append(b.recentre, channels...)
	b.ver++
	b.mu.Unlock()
}

// Move implements alerts.Moving: from the unit's next frame on, its
// learned normal takes in the state of every channel over the recentring
// window as an accepted incident's channels do (accept.go: widened by
// alerts.accept_weight, or the means moved when it is negative). A new
// operating point moves the whole unit along its relations: taking in only
// the leading channels would break the relations between them and the
// rest (measured on the realism suite's supply pressure move: T² stayed
// at 1.5 times its limit after a widening of the ten leading channels,
// and fell to half of it with every channel).
func (l learning) Move(unit string) {
	if l.p.opt.Fit {
		return
	}
	b := l.p.masks.box(unit)
	b.mu.Lock()
	b.move = true
	b.ver++
	b.mu.Unlock()
}

// recentreFrames is the number of frames whose mean becomes the new
// normal level of an accepted incident's channels (tracker.Recentre): the
// level then carries σ/√30 of noise, 0.18σ (design choice).
const recentreFrames = 30

// learnMask returns the mask the unit's next frame is learned with (nil:
// none), rebuilt only when the engine changed it or the unit grew, and
// recentres the channels of an incident just accepted over the first
// recentreFrames frames after the acceptance.
func (u *Unit) learnMask() []bool {
	m := u.learnMaskOnly()
	if u.fixed {
		// A model held fixed (adapt=false) learns nothing, not even an
		// accepted new normal.
		u.recentK = recentreFrames
		return nil
	}
	if u.recentK < recentreFrames && len(u.recent) == len(u.x) {
		u.recentK++
		if w := u.acceptWeight(); w > 0 {
			u.widenStates(w / recentreFrames)
			u.tr.Widen(u.x, u.recent, w/recentreFrames)
		} else {
			u.tr.Recentre(u.x, u.recent, u.recentK)
		}
		if u.recentK == recentreFrames {
			clear(u.recent)
			if u.acceptWeight() > 0 {
				// The widened normal holds from the next frame on; a
				// failed refresh keeps the previous model until the
				// regular one.
				_ = u.tr.Refresh()
				u.refreshStates()
			}
		}
	}
	return m
}

// RecentreState is a recentring in progress (see learnMask): the channels
// whose EW means are being moved to the mean of recentreFrames frames
// after an acceptance, and how many of those frames are done. A
// checkpoint carries it so that a restart inside the window goes on
// where the uninterrupted run would.
type RecentreState struct {
	Channels []string `json:"channels"`
	Done     int      `json:"done"` // frames done, 0 ≤ Done < recentreFrames
}

// recentreState returns the recentring in progress after the unit's last
// frame, nil when there is none: an acceptance handed over by the alarm
// engine but not yet taken up (it restarts the window at the next frame,
// see learnMaskOnly) counts as a window with no frame done. Called under
// p.mu; it changes nothing.
func (u *Unit) recentreState() *RecentreState {
	var s RecentreState
	if u.recentK < recentreFrames && len(u.recent) == len(u.names) {
		for k, on := range u.recent {
			if on {
				s.Channels = append(s.Channels, u.names[k])
			}
		}
		s.Done = u.recentK
	}
	if u.mbox == nil {
		u.mbox = u.p.masks.box(u.Name)
	}
	b := u.mbox
	b.mu.Lock()
	for _, n := range b.recentre {
		if slices.Contains(u.names, n) && !slices.Contains(s.Channels, n) {
			s.Channels = append(s.Channels, n)
		}
		s.Done = 0
	}
	if b.move {
		s.Channels, s.Done = slices.Clone(u.names), 0
	}
	b.mu.Unlock()
	if len(s.Channels) == 0 || u.fixed {
		return nil
	}
	slices.Sort(s.Channels)
	return &s
}

// setRecentre restores a checkpoint's recentring in progress (nil: none).
// Channels the unit does not hold are ignored.
func (u *Unit) setRecentre(s *RecentreState) {
	u.recentK = recentreFrames
	if s == nil || s.Done < 0 || s.Done >= recentreFrames {
		return
	}
	u.recent = make([]bool, len(u.names))
	for k, n := range u.names {
		u.recent[k] = slices.Contains(s.Channels, n)
	}
	u.recentK = s.Done
}

func (u *Unit) learnMaskOnly() []bool {
	if u.mbox == nil {
		u.mbox = u.p.masks.box(u.Name)
	}
	b := u.mbox
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.ver == u.mver && len(u.mask) == len(u.names) {
		if !u.masked {
			return nil
		}
		return u.mask
	}
	u.mver = b.ver
	if len(u.mask) != len(u.names) {
		u.mask = make([]bool, len(u.names))
	}
	if len(b.recentre) > 0 || b.move {
		if len(u.recent) != len(u.names) {
			u.recent = make([]bool, len(u.names))
		}
		for k, n := range u.names {
			u.recent[k] = u.recent[k] || b.move || slices.Contains(b.recentre, n)
		}
		u.recentK = 0
		b.recentre, b.move = b.recentre[:0], false
	}
	u.masked = false
	for k, n := range u.names {
		u.mask[k] = slices.Contains(b.ch, n)
		u.masked = u.masked || u.mask[k]
	}
	if !u.masked {
		return nil
	}
	return u.mask
}

// Location of a frame: its leading contributors (alerts.IsLeading: the
// first alerts.LeadCount ranked channels over their own RBC limits and near
// the first one), widened by the channels that
// move with them, i.e. the support of each mode holding a leading channel,
// restricted to loadings of at least widenShare of the mode's largest (a
// sparse mode whose cardinality exceeds its group of sensors carries a
// few near-zero loadings from elsewhere).
const widenShare = 0.3

// location appends to dst the names of the frame's location (see
// above). It allocates only when the unit grew.
func (u *Unit) location(dst []string) []string {
	s := &u.score
	if len(u.locMark) != len(u.names) {
		u.locMark = make([]bool, len(u.names))
	}
	clear(u.locMark)
	add := func(i int) {
		if i >= 0 && i < len(u.names) && !u.locMark[i] {
			u.locMark[i] = true
			dst = append(dst, u.names[i])
		}
	}
	ms := u.tr.Modes()
	lead, first := 0, 0.0
	for _, c := range s.Contrib {
		if lead == alerts.LeadCount {
			break
		}
		if !alerts.IsLeading(c.RBC, c.RBCLimit, first) {
			continue
		}
		if lead == 0 {
			first = c.RBC
		}
		lead++
		add(u.base(c.Channel))
		for _, id := range c.Modes {
			for j := 0; j < ms.Count(); j++ {
				m := ms.Mode(j)
				if m.ID != id {
					continue
				}
				big := 0.0
				for _, i := range m.Support {
					big = max(big, math.Abs(m.Loadings[i]))
				}
				for _, i := range m.Support {
					if math.Abs(m.Loadings[i]) >= widenShare*big {
						add(u.base(i))
					}
				}
			}
		}
	}
	return dst
}

// learnSettings sets how a unit's tracker learns from the configuration,
// also for a unit started from a fitted model (whose file keeps only the
// settings its state depends on): the Huber constant (model.robust) and,
// except while fitting, the scoring lag (model.score_lag, in frames of
// period).
func (p *Pipeline) learnSettings(cfg *tracker.Config, m configs.Model, period time.Duration) {
	m = m.Over(configs.DefaultModel())
	cfg.Robust = m.Robust
	cfg.Persist = m.Persist
	cfg.PersistLevelsOnly = p.opt.Fit // the normal log is normal by the user's word: its levels are learned
	cfg.Lag = 0
	if !p.opt.Fit && m.ScoreLag > 0 && period > 0 {
		cfg.Lag = int(m.ScoreLag / period)
	}
	cfg.LevelStep = LevelStepFrames(m, period)
}

// LevelStepFrames returns the frames in each window of the level-shift
// rule (model.level_shift, model.level_window) at frame period period: the
// window's plant time in frames, rounded, at least 2 and at most
// tracker.MaxLevelStepFrames; 0 when the rule is off or the period unknown.
func LevelStepFrames(m configs.Model, period time.Duration) int {
	m = m.Over(configs.DefaultModel())
	if (m.LevelShift != nil && !*m.LevelShift) || period <= 0 || m.LevelWindow <= 0 {
		return 0
	}
	k := int((m.LevelWindow + period/2) / period)
	return min(max(k, 2), tracker.MaxLevelStepFrames)
}
