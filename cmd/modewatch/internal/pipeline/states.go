package pipeline

import (
	"errors"
	"fmt"
	"slices"
	"strconv"
	"time"

	"modewatch/alerts"
	"modewatch/stream"
	"modewatch/tracker"
)

// Operating states. A unit that names a state channel (units[].state, or
// the model file it was fitted into) holds one tracker per state: the
// frames of a state train and are scored by that state's model only, so a
// start or stop no longer looks like a fault and a fault inside one state
// is judged against that state's spread, not the pooled one. Channels at
// rest in a state (constant there: a stopped machine's speed) leave that
// state's model by the tracker's own flat-line rule. The unit's tracker
// and score (u.tr, u.score) are those of the state of the latest frame.
//
// Transitions: after a switch the statistics take a while to settle (the
// plant moves from one state's operating point to the other's). fit
// learns how long from the normal log: for every transition it keeps the
// first holdOffWindow frames, scores them with the finished model of the
// new state, and takes the longest time until φ stays below its limit for
// settleFrames frames. During that hold-off frames are scored and shown
// but start no incident.

const (
	// holdOffWindow bounds the frames kept after a transition in fit, and
	// so the learned hold-off (frames).
	holdOffWindow = 120
	// maxHoldOffWindows bounds the transitions kept in fit.
	maxHoldOffWindows = 64
	// settleFrames: the statistics have settled after a transition once
	// φ stays below its limit this many frames in a row.
	settleFrames = 5
)

// stateModel is one operating state of a unit.
type stateModel struct {
	key    float64
	tr     *tracker.Tracker
	score  tracker.Score // spare while the state is active (its score is u.score)
	frames uint64        // frames of this state scored
	fitted bool          // from the model file
	// learnFrames: a state new to a fitted unit is learned for this many
	// frames (alerts.accept_after of its own frame time) before its
	// statistics may start incidents, like any new normal; 0: no such
	// hold (a state of the fitted model, or accept_after never).
	learnFrames uint64
}

// holdWindow holds frames after one transition (fit).
type holdWindow struct {
	state int
	x     []float64 // n frames × p values
	miss  []bool
	n, p  int
}

// unitStates are a unit's operating states.
type unitStates struct {
	channel string
	bands   []float64
	reg     int // registry index of the state channel, -1 until discovered
	models  []*stateModel
	cur     int // active state (-1: none yet; u.score is a spare)
	since   int // frames since the last switch, capped at holdOffWindow
	holdOff int // frames after a switch that start no incident
	noState uint64
	full    bool // MaxStates reached and said so
	wins    []*holdWindow
	auto    *autoStates // states found by fit (state: auto), nil: by channel
	// noWindows: do not time transitions (fit's kept frames were thinned).
	noWindows bool
	// minModes: the floor of every state's automatic mode count
	// (statemodes.go), 0: none.
	minModes  int
	bip       *bipWork  // posterior scoring of found states (bipstates.go)
	posterior bool      // found states scored by their posterior (model.state_scoring)
	dev       []float64 // scratch of an accepted deviation carried to the other states (acceptstates.go)
}

// newStates returns the states of a unit classified by channel.
func newStates(channel string, bands []float64) *unitStates {
	return &unitStates{channel: channel, bands: slices.Clone(bands), reg: -1, cur: -1, since: holdOffWindow}
}

// label names a state for people: the value, the band, or the found
// state's number.
func (s *unitStates) label(key float64) string {
	if s.auto != nil {
		return fmt.Sprintf("found-%d", int(key)+1)
	}
	if len(s.bands) == 0 {
		return strconv.FormatFloat(key, 'g', -1, 64)
	}
	k := int(key)
	switch {
	case k == 0:
		return fmt.Sprintf("below %g", s.bands[0])
	case k == len(s.bands):
		return fmt.Sprintf("%g and above", s.bands[k-1])
	}
	return fmt.Sprintf("%g to %g", s.bands[k-1], s.bands[k])
}

// find returns the index of the state with key, or -1.
func (s *unitStates) find(key float64) int {
	for i, m := range s.models {
		if m.key == key {
			return i
		}
	}
	return -1
}

// enterState selects the model of frame f's state before the unit steps
// it: it classifies the state channel's value, creates the model of a
// state not seen before (a notice when the unit started from a fitted
// model) and swaps the unit's tracker and score to that state. It reports
// false when the frame has no state (the state channel missing before any
// state was seen); such a frame is not scored. It allocates only when a
// state is created.
func (u *Unit) enterState(f *stream.Frame) bool {
	s := u.states
	if s.reg < 0 && s.auto == nil {
		if i, ok := u.p.ch.Index(s.channel); ok {
			s.reg = i
		}
	}
	key, ok := 0.0, false
	switch {
	case s.auto != nil:
		key, ok = s.auto.classify(u.x, u.miss), true
	case s.reg >= 0 && s.reg < len(f.Values) && !f.Missing[s.reg]:
		key, ok = tracker.StateKey(f.Values[s.reg], s.bands)
	}
	return u.enterKey(key, ok, f.Start)
}

// enterKey is enterState for a classified frame (ok false: no state).
func (u *Unit) enterKey(key float64, ok bool, t time.Time) bool {
	s := u.states
	next := s.cur
	if ok {
		next = s.find(key)
		if next < 0 {
			next = u.newState(key, t)
		}
	}
	if next < 0 {
		s.noState++
		return false
	}
	if s.since < holdOffWindow {
		s.since++
	}
	if next != s.cur {
		u.switchState(next)
	}
	if u.p.opt.Fit {
		s.keepWindow(u.x, u.miss)
	}
	return true
}

// newState creates the model of a state not seen before and returns its
// index, or the current state when MaxStates are reached (said once).
func (u *Unit) newState(key float64, t time.Time) int {
	s := u.states
	if len(s.models) >= tracker.MaxStates {
		if !s.full {
			s.full = true
			u.p.log.Warn("unit has the most operating states it keeps a model for; frames of further states are scored by the current state's model",
				"unit", u.Name, "states", len(s.models), "state_channel", s.channel)
			u.p.alerts.Notice(u.Name, alerts.GroupState, "full", fmt.Sprintf(
				"more than %d operating states on %s: further states are scored by the current state's model", tracker.MaxStates, s.channel), t)
		}
		return s.cur
	}
	var tr *tracker.Tracker
	if len(s.models) == 0 && u.tr != nil && u.frames == 0 && !u.baseline {
		tr = u.tr // the unit's first tracker becomes its first state's
	} else {
		cfg, err := u.trackerConfig(len(u.idx))
		if err == nil {
			tr, err = tracker.New(len(u.idx), cfg)
		}
		if err != nil {
			u.p.log.Error("operating state cannot get a model; its frames are scored by the current state's model", "unit", u.Name, "state", s.label(key), "err", err)
			return s.cur
		}
	}
	if !u.p.opt.Fit && tr != u.tr {
		u.floorScale(tr, u.Profiles()) // fit sets the floor with the final profiles (statesBaseline)
	}
	m := &stateModel{key: key, tr: tr}
	s.models = append(s.models, m)
	if u.baseline && !u.p.opt.Fit {
		after := u.acceptAfter()
		m.learnFrames = learnFrames(after, u.p.opt.Period)
		text := fmt.Sprintf("new operating state %s=%s: not in the fitted model; its model is learned from now on and its statistics start no incident before it has run %v (accept_after), like any new normal",
			s.channel, s.label(key), after)
		if m.learnFrames == 0 {
			text = fmt.Sprintf("new operating state %s=%s: not in the fitted model; its model is learned from now on (warming up, no statistics until then)",
				s.channel, s.label(key))
		}
		u.p.log.Info("new operating state", "unit", u.Name, "state_channel", s.channel, "state", s.label(key), "time", t)
		u.p.alerts.Notice(u.Name, alerts.GroupState, s.label(key), text, t)
	}
	return len(s.models) - 1
}

// switchState makes state i the unit's active model.
func (u *Unit) switchState(i int) {
	s := u.states
	if i != s.cur {
		// Its smoothed frames are from the last time the state ran: start
		// them again (tracker.ResetSmoothing).
		s.models[i].tr.ResetSmoothing()
	}
	if s.cur >= 0 {
		s.models[s.cur].score, u.score = u.score, s.models[s.cur].score
	}
	m := s.models[i]
	u.score, m.score = m.score, u.score
	if p2 := len(u.idx); m.tr.P() < p2 {
		if cfg, err := u.trackerConfig(p2); err == nil {
			if err := m.tr.Grow(p2, cfg); err != nil {
				u.p.log.Error("operating state's model cannot take the unit's new channels", "unit", u.Name, "err", err)
			}
		}
	}
	u.tr = m.tr
	u.frozen = m.tr.Frozen()
	if s.cur >= 0 {
		s.since = 0
		if u.p.opt.Fit && !s.noWindows && len(s.wins) < maxHoldOffWindows {
			s.wins = append(s.wins, &holdWindow{state: i, p: len(u.x)})
		}
	}
	s.cur = i
}

// keepWindow adds the frame to the transition window being filled (fit).
func (s *unitStates) keepWindow(x []float64, miss []bool) {
	if len(s.wins) == 0 {
		return
	}
	w := s.wins[len(s.wins)-1]
	if w.state != s.cur || w.n >= holdOffWindow || len(x) != w.p || s.since != w.n+1 {
		return
	}
	w.x = append(w.x, x...)
	w.miss = append(w.miss, miss...)
	w.n++
}

// inHoldOff reports whether the latest frame lies within the hold-off
// after a transition, or in a new state still being learned.
func (s *unitStates) inHoldOff() bool {
	if s.since < s.holdOff {
		return true
	}
	return s.cur >= 0 && s.models[s.cur].learning()
}

// learning reports whether a new state is still within its first
// accept_after of frames.
func (m *stateModel) learning() bool { return m.frames < m.learnFrames }

// learnFrames returns the frames of period in the bounded hold after (at
// least one; 0 when after is negative: never).
func learnFrames(after, period time.Duration) uint64 {
	if after < 0 || period <= 0 {
		return 0
	}
	return uint64(max(1, (after+period-1)/period))
}

// acceptAfter returns the unit's bounded hold (alerts.accept_after, the
// alarm engine's default when unset; negative: never).
func (u *Unit) acceptAfter() time.Duration {
	if h := u.p.cfg.AlertsFor(u.Name).AcceptAfter; h != 0 {
		return h
	}
	return alerts.DefaultAcceptAfter
}

// stateLearned publishes the notice that the current state, new to the
// fitted model, has been learned for accept_after and is scored from now
// on. It is called once its frames reach learnFrames.
func (u *Unit) stateLearned(t time.Time) {
	s := u.states
	m := s.models[s.cur]
	text := fmt.Sprintf("operating state %s=%s learned: %d frames since it was new; its statistics start incidents from now on",
		s.channel, s.label(m.key), m.frames)
	u.p.log.Info("new operating state learned", "unit", u.Name, "state_channel", s.channel, "state", s.label(m.key), "time", t)
	u.p.alerts.Notice(u.Name, alerts.GroupState, s.label(m.key)+":learned", text, t)
}

// learnHoldOff sets the hold-off from the transition windows, scoring each
// with the finished (refreshed) model of its state.
func (s *unitStates) learnHoldOff() {
	var sc tracker.Score
	h := 0
	for _, w := range s.wins {
		tr := s.models[w.state].tr
		if tr.P() != w.p || tr.State() == tracker.StateWarmUp {
			continue
		}
		settled, calm := w.n, 0
		for j := 0; j < w.n; j++ {
			x, miss := w.x[j*w.p:(j+1)*w.p], w.miss[j*w.p:(j+1)*w.p]
			err := tr.Evaluate(&sc, x, miss)
			if err == nil {
				s.combine(&sc, w.state, x, miss) // found states: as they are scored (bipstates.go)
			}
			if err == nil && sc.Ready && sc.Phi <= sc.PhiLimit {
				if calm++; calm == settleFrames {
					settled = j + 1 - settleFrames
					break
				}
			} else {
				calm = 0
			}
		}
		if calm < settleFrames && w.n < holdOffWindow {
			continue // cut short by the next transition before settling: says nothing
		}
		h = max(h, settled)
	}
	s.holdOff = h
	s.wins = nil
}

// StateModel is one operating state of a unit in a model file.
type StateModel struct {
	Key    float64    `json:"key"`
	Label  string     `json:"label"`
	Frames uint64     `json:"frames"`
	Modes  []ModeView `json:"modes"`
	Limits LimitsView `json:"limits"`
	State  []byte     `json:"state"`
	// DriverSlopes: the state model's regression on the context channels.
	DriverSlopes []float64 `json:"driver_slopes,omitempty"`
	// DriverLags: the lag-1 statistics of its slope test.
	DriverLags []float64 `json:"driver_lags,omitempty"`
	// Online: a state new to the fitted model, learned in the run that
	// wrote this checkpoint; LearnFrames its bounded hold in frames
	// (stateModel.learnFrames). Absent in fitted models.
	Online      bool   `json:"online,omitempty"`
	LearnFrames uint64 `json:"learn_frames,omitempty"`
}

// StatesFile is the operating-state part of a model unit.
type StatesFile struct {
	Channel string      `json:"channel"` // "auto": found by fit (Auto)
	Bands   []float64   `json:"bands,omitempty"`
	Auto    *autoStates `json:"auto,omitempty"`
	HoldOff int         `json:"hold_off_frames"`
	// MinModes is the floor of every state's automatic mode count (the
	// largest count of the fitted states; absent: none).
	MinModes int          `json:"min_modes,omitempty"`
	Models   []StateModel `json:"models"`
	// Current is 1 + the index in Models of the state the unit was in,
	// and Since the frames since it entered it (up to the hold-off
	// window), in a checkpoint (absent in a fitted model file: a replay
	// enters the state of its first frame). A restored unit goes on in
	// that state, as an uninterrupted run does, instead of entering it
	// anew at its first frame (which starts its smoothed frames again).
	Current int `json:"current,omitempty"`
	Since   int `json:"since,omitempty"`
}

// statesBaseline refreshes and freezes every state model with a model and
// returns them for the model file, the hold-off learned; a state without
// enough frames for a model is left out (reported) and is a new state
// when it comes again. It returns the index of the state with the most
// frames, whose tracker the file's unit State holds.
func (u *Unit) statesBaseline(withLimits bool) (*StatesFile, int, error) {
	s := u.states
	out := &StatesFile{Channel: s.channel, Bands: slices.Clone(s.bands), Auto: s.auto}
	best, bestN := -1, uint64(0)
	var errs []error
	warm := uint64(u.tr.Config().WarmUp)
	if u.p.opt.Fit {
		u.alignStateModes()
	}
	out.MinModes = s.minModes
	for i, m := range s.models {
		if u.p.opt.Fit {
			if m.frames < warm {
				errs = append(errs, fmt.Errorf("state %s: %d frames, fewer than the %d warm-up frames a model needs (a new state when it comes again)",
					s.label(m.key), m.frames, warm))
				continue
			}
			u.floorScale(m.tr, u.Profiles())
			if err := m.tr.Refresh(); err != nil {
				errs = append(errs, fmt.Errorf("state %s: %d frames: %w", s.label(m.key), m.frames, err))
				continue
			}
			m.tr.Freeze()
		}
		b, err := saveState(m.tr)
		if err != nil {
			errs = append(errs, fmt.Errorf("state %s: %w", s.label(m.key), err))
			continue
		}
		sm := StateModel{Key: m.key, Label: s.label(m.key), Frames: m.frames, Modes: u.modesOf(m.tr), State: b,
			DriverSlopes: u.driverSlopes(m.tr, u.p.opt.Fit), DriverLags: u.driverLags(m.tr), Online: !m.fitted && !u.p.opt.Fit, LearnFrames: m.learnFrames}
		if withLimits {
			sm.Limits = limitsOf(m.tr)
		}
		out.Models = append(out.Models, sm)
		if i == s.cur && !u.p.opt.Fit {
			out.Current, out.Since = len(out.Models), s.since
		}
		if best < 0 || m.frames > bestN {
			best, bestN = i, m.frames
		}
	}
	if u.p.opt.Fit {
		s.learnHoldOff()
	}
	out.HoldOff = s.holdOff
	if best < 0 {
		errs = append(errs, fmt.Errorf("no operating state has a model"))
	}
	return out, best, errors.Join(errs...)
}

// restoreStates rebuilds a unit's states from a model file.
func (u *Unit) restoreStates(sf *StatesFile, p int, cfg tracker.Config) error {
	s := newStates(sf.Channel, sf.Bands)
	s.holdOff = sf.HoldOff
	s.minModes = max(sf.MinModes, 0)
	floorModes(&cfg, s.minModes) // buildFromModel did the same for the unit's tracker
	if sf.Auto != nil {
		if err := sf.Auto.check(p); err != nil {
			return err
		}
		s.auto = sf.Auto
		s.posterior = u.posteriorScoring()
	}
	for _, sm := range sf.Models {
		tr, err := tracker.New(p, cfg)
		if err != nil {
			return err
		}
		if err := restoreState(tr, sm.State); err != nil {
			return fmt.Errorf("state %s: %w", sm.Label, err)
		}
		if len(s.models) >= tracker.MaxStates {
			return fmt.Errorf("more than %d operating states", tracker.MaxStates)
		}
		s.models = append(s.models, &stateModel{key: sm.Key, tr: tr, frames: sm.Frames, fitted: !sm.Online, learnFrames: sm.LearnFrames})
		u.restoreSlopes(tr, sm.DriverSlopes, sm.DriverLags)
	}
	if len(s.models) == 0 {
		return fmt.Errorf("operating states without a model")
	}
	u.states = s
	u.tr = s.models[0].tr
	if c := sf.Current - 1; c >= 0 && c < len(s.models) && sf.Since >= 0 {
		s.cur, s.since = c, min(sf.Since, holdOffWindow)
		u.tr = s.models[c].tr
	}
	u.frozen = u.tr.Frozen()
	return nil
}

// StateView describes one operating state for the API and reports.
type StateView struct {
	Key    float64 `json:"key"`
	Label  string  `json:"label"`
	Frames uint64  `json:"frames"`
	Fitted bool    `json:"fitted"` // in the fitted model (false: new, learned online)
	// Learning: a new state within its first accept_after; its
	// statistics start no incident yet.
	Learning bool       `json:"learning,omitempty"`
	Current  bool       `json:"current"`
	Model    string     `json:"model_state"`
	Modes    []ModeView `json:"modes"`
}

// statesView lists the unit's states (nil without states).
func (u *Unit) statesView() []StateView {
	s := u.states
	if s == nil {
		return nil
	}
	out := make([]StateView, 0, len(s.models))
	for i, m := range s.models {
		st := "warmup"
		switch m.tr.State() {
		case tracker.StateBaseline:
			st = "baseline"
		case tracker.StateFrozen:
			st = "frozen"
		case tracker.StateAdapting:
			st = "adapting"
		}
		out = append(out, StateView{Key: m.key, Label: s.label(m.key), Frames: m.frames, Fitted: m.fitted,
			Learning: m.learning(), Current: i == s.cur, Model: st, Modes: u.modesOf(m.tr)})
	}
	return out
}

// CurrentState returns the label of the unit's current operating state,
// "" without states or before the first.
func (u *Unit) CurrentState() string {
	if s := u.states; s != nil && s.cur >= 0 {
		return s.label(s.models[s.cur].key)
	}
	return ""
}
