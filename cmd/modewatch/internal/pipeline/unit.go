package pipeline

import (
	"fmt"
	"slices"
	"sync/atomic"
	"time"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/stream"
	"modewatch/tracker"
)

// Unit is one plant unit: its channels, its model and its latest score.
type Unit struct {
	Name string

	p     *Pipeline
	model configs.Model
	stats configs.Statistics // model.statistics: which statistics raise alarms
	scale float64            // every alarm limit is multiplied by it (budget calibration; 1 without)
	cal   *Calibration       // the calibration behind scale, kept for checkpoints
	// scales, where above zero, replace scale for one statistic (in the
	// order of statNames; Calibration.Scales).
	scales [nStatistics]float64
	// smooth is model.smoothing (EWMA weight of the alarm statistics; 0:
	// off); sm holds the smoothed ratios and smOK whether each started.
	smooth float64
	sm     [nStatistics]float64
	smOK   [nStatistics]bool
	last   []alerts.Stat // this frame's alarm statistics, unscaled
	ctmp   []alerts.Contributor
	idx    []int    // registry index of each model channel
	names  []string // channel names, same order

	tr    *tracker.Tracker
	x     []float64 // the frame as the tracker sees it (lagged.go: p·(L+1) with model.lags)
	miss  []bool
	score tracker.Score
	lag   *tracker.Lagged // model.lags: the previous frames (nil: static model)
	lmask []bool          // learning mask widened to the lagged columns

	fixed         bool      // adapt=false: the model never learns
	equal         bool      // equal weights (fit without a half-life)
	skipUntil     time.Time // frames up to this start were scored before a restart
	firstT, lastT time.Time // first and last frame scored
	// lastV, lastAt: each model channel's value in the frame lastT and the
	// event time (ns) of its reading; lastAt is noReading where missing.
	// A checkpoint saves them to seed the aligner on restart.
	lastV  []float64
	lastAt []int64
	// seedV, seedAt: after a restore, the checkpoint's carried readings
	// (as lastV, lastAt), used for the channels the frames do not reach
	// yet (see carrySeeds); nil once none can be used.
	seedV       []float64
	seedAt      []int64
	baseline    bool        // started from a fitted model
	alertFrozen atomic.Bool // set by the alarm engine
	gap         atomic.Bool // readings may have been lost upstream (NoteIntakeGap); reported at the next frame
	frozen      bool        // the tracker is frozen now
	failed      error       // the model could not be built; the unit is not scored

	// Data quality: profile from the model file (nil: none), the screen
	// applying it, and in fit the learner of a new profile.
	profile []alerts.ChannelProfile
	screen  *alerts.Screen
	learn   *profiler
	// lvl receives the tracker's level steps of the frame scored
	// (tracker.LevelStepsTo), for the screen and, in fit, the profiler.
	lvl []float64
	// states: one model per operating state (nil: one model); see states.go.
	states *unitStates
	// Context channels (drivers from other units; context.go): their
	// names, a flag per model channel, and the regression removing them.
	context []string
	ctx     []bool
	nCtx    int
	drivers map[*tracker.Tracker]*tracker.Drivers // one regression per model (state)
	slopes  map[*tracker.Tracker]savedDrivers     // saved regressions to restore (model file)
	adj     []float64
	autoBuf *autoBuffer // fit with state: auto: the frames kept

	// Counters, under p.mu.
	frames      uint64 // frames scored
	empty       uint64 // frames with every channel of the unit missing
	stepErrors  uint64
	skipped     uint64        // frames already scored before a restart
	refreshes   uint64        // mode refreshes timed (see step)
	lastRefresh time.Duration // wall time of the last frame step that refreshed
	notModelled []string      // channels that could not join the model (fixed model, Grow failed)
	refused     uint64        // channels refused at the unit's channel cap
	refusedEx   []string      // the first few of them, for the view

	// Learning around incidents (location.go).
	mbox *maskBox
	mver uint64
	mask []bool // channels learned as their reconstruction
	// beyond scores the frame with mask's channels reconstructed, bmiss
	// its missing flags (beyond.go).
	beyond    tracker.Score
	bmiss     []bool
	beyondSet int8    // alerts.beyond_incidents: 0 not read yet, 1 on, -1 off
	masked    bool    // some channel of mask is set
	locMark   []bool  // scratch of location
	recent    []bool  // channels being recentred after an acceptance
	recentK   int     // frames of the recentring done (recentreFrames: none pending)
	acceptW   float64 // alerts.accept_weight or its default; 0: not read yet (accept.go)

	pending int // what stepModel left for finish (pendNone, ...)
	worker  int // 1 + index of the scoring worker that steps this unit (pool.go); 0: none yet

}

func newUnit(p *Pipeline, name string) *Unit {
	m := p.cfg.ModelFor(name)
	u := &Unit{Name: name, p: p, model: m, stats: alarmStats(m), scale: 1, smooth: m.Over(configs.DefaultModel()).Smoothing, fixed: m.Adapt != nil && !*m.Adapt,
		equal: p.opt.Fit && !p.opt.FitHalfLife, recentK: recentreFrames}
	switch i := p.cfg.Unit(name); {
	case p.isAuto(name):
		if p.opt.Fit {
			u.autoBuf = &autoBuffer{stride: 1} // states found at the end (autostates.go)
		}
	case i >= 0 && p.cfg.Units[i].State == configs.StateNone:
	case i >= 0 && p.cfg.Units[i].State != "":
		u.states = newStates(p.cfg.Units[i].State, p.cfg.Units[i].StateBands)
	case p.wantsGateStates(name):
		u.autoBuf = &autoBuffer{stride: 1, gate: &gateScreen{}} // a status channel looked for at the end (gatestates.go)
	}
	u.context = slices.Clone(p.contextOf(name))
	u.staticIfNeeded()
	return u
}

// staticIfNeeded turns model.lags off, with a warning, for a unit with
// operating states or context channels, which the lagged model does not
// support: its model is static, and its settings (and model file) say so.
func (u *Unit) staticIfNeeded() {
	if u.lags() == 0 || (u.states == nil && u.autoBuf == nil && !u.p.isAuto(u.Name) && len(u.context) == 0) {
		return
	}
	u.p.log.Warn("model.lags does not combine with operating states or context channels; the unit's model is static",
		"unit", u.Name, "lags", u.lags())
	u.model.Lags = -1 // Over keeps an explicit value; lags() reads it as 0
}

// addChannel gives registry channel i to the unit and reports whether it
// is modelled. A channel the unit's model already names (fitted baseline,
// restored checkpoint) is resolved by name; a new one joins the model: at
// the next frame the tracker is widened (tracker.Grow), keeping what it
// learned, and the channel warms up until it has the warm-up frames. Only
// a model held fixed (adapt=false) cannot take a new channel: it is
// reported once and left out.
func (u *Unit) addChannel(i int, name string) bool {
	for k, n := range u.names {
		if n == name && u.idx[k] < 0 {
			u.idx[k] = i
			return true
		}
	}
	if len(u.names) >= u.model.MaxChannels {
		u.refuse(name)
		return false
	}
	if u.lag != nil && u.tr != nil {
		u.p.log.Warn("channel is not part of the unit's model: a model with lagged copies (model.lags) keeps the channels it started with; it is not modelled until the model is refitted",
			"unit", u.Name, "channel", name)
		u.notModelled = append(u.notModelled, name)
		return false
	}
	if u.fixed && u.tr != nil {
		u.p.log.Warn("channel is not part of the unit's model, which is held fixed (adapt=false); it is not modelled until the model is refitted",
			"unit", u.Name, "channel", name)
		u.notModelled = append(u.notModelled, name)
		return false
	}
	u.idx = append(u.idx, i)
	u.names = append(u.names, name)
	return true
}

// IntakeChannel is the channel name of an intake-gap quality alert.
const IntakeChannel = "(intake)"

// NoteIntakeGap tells every unit that readings may have been lost upstream
// (the readings consumer or stream was recreated): each raises an
// intake-gap quality alert at its next frame. Safe from any goroutine.
func (p *Pipeline) NoteIntakeGap() {
	for _, u := range p.Units() {
		u.gap.Store(true)
	}
}

// maxRefusedShown bounds the refused channel names a unit keeps for its view.
const maxRefusedShown = 16

// refuse reports a channel refused because the unit has model.max_channels
// channels already. addChannel sees each registry channel once, so each
// name is logged once.
func (u *Unit) refuse(name string) {
	u.refused++
	if len(u.refusedEx) < maxRefusedShown {
		u.refusedEx = append(u.refusedEx, name)
	}
	u.p.log.Warn("channel refused: the unit is at its channel cap (model.max_channels); it is not modelled",
		"unit", u.Name, "channel", name, "cap", u.model.MaxChannels, "refused", u.refused)
}

// grow widens the unit's tracker to the channels added since it was built,
// keeping what it learned (tracker.Grow); the new channels are learned from
// this frame on and enter the model once they have WarmUp frames. Each new
// channel is logged once. If the tracker cannot grow, the new channels are
// reported and left out.
func (u *Unit) grow() {
	p0, p2 := u.tr.P(), len(u.idx)
	cfg, err := u.trackerConfig(p2)
	if err == nil {
		err = u.tr.Grow(p2, cfg)
	}
	if err != nil {
		for _, n := range u.names[p0:] {
			u.p.log.Error("new channel cannot join the unit's model; it is not modelled", "unit", u.Name, "channel", n, "err", err)
			u.notModelled = append(u.notModelled, n)
		}
		u.names, u.idx = u.names[:p0], u.idx[:p0]
		return
	}
	u.x = append(u.x, make([]float64, p2-p0)...)
	u.miss = append(u.miss, make([]bool, p2-p0)...)
	state := "warming up with the unit"
	if u.tr.State() != tracker.StateWarmUp {
		state = "warming up; the unit's model goes on without it meanwhile"
	}
	for _, n := range u.names[p0:] {
		u.p.log.Info("new channel joins the unit's model", "unit", u.Name, "channel", n, "state", state,
			"warmup_frames", u.tr.Config().WarmUp, "channels", p2)
	}
}

// Channels returns the names of the unit's model channels.
func (u *Unit) Channels() []string { return append([]string(nil), u.names...) }

// Tracker returns the unit's tracker (nil before the first frame). It must
// only be used from the frame goroutine or after the input has ended.
func (u *Unit) Tracker() *tracker.Tracker { return u.tr }

// trackerConfig returns the configuration of a tracker of the unit over
// p columns: its model settings (TrackerConfig), the pipeline's learning
// settings and, for a unit with operating states, their shared floor on
// the mode count (stateModesConfig). Every tracker the unit builds or
// grows online takes it, so a grown state model keeps the floor.
func (u *Unit) trackerConfig(p int) (tracker.Config, error) {
	cfg, err := TrackerConfig(u.model, u.p.opt.Period, p, u.equal)
	u.p.learnSettings(&cfg, u.model, u.p.opt.Period)
	u.stateModesConfig(&cfg)
	return cfg, err
}

// build creates the tracker over the unit's current channels.
func (u *Unit) build() error {
	cfg, err := u.trackerConfig(len(u.idx))
	if err != nil {
		return fmt.Errorf("pipeline: unit %s: %w", u.Name, err)
	}
	tr, err := tracker.New(trackerWidth(u.model, len(u.idx)), cfg)
	if err != nil {
		return fmt.Errorf("pipeline: unit %s (%d channels): %w", u.Name, len(u.idx), err)
	}
	if err := u.newLagged(len(u.idx)); err != nil {
		return err
	}
	u.tr = tr
	u.frozen = false
	u.p.log.Info("unit model built", "unit", u.Name, "channels", len(u.idx), "sparsity", u.model.Sparsity,
		"modes", u.model.Modes.String(), "halflife", u.model.HalfLife, "warmup_frames", u.model.WarmUp)
	return nil
}

// step scores frame f for this unit and hands the score on. Called under
// p.mu.
func (u *Unit) step(f *stream.Frame) {
	u.stepModel(f)
	u.finish(f)
}

// stepModel steps the unit's tracker over frame f (the costly part of a frame)
// and leaves what to hand on for finish. For a unit whose parallel() holds
// it touches only the unit's own state, so the stepModel calls of different
// units run in parallel (pool.go). Called under p.mu.
func (u *Unit) stepModel(f *stream.Frame) {
	u.pending = pendNone
	if u.failed != nil {
		return
	}
	if !f.Start.After(u.skipUntil) && !u.skipUntil.IsZero() {
		u.skipped++
		return // scored before the restart
	}
	switch {
	case u.tr == nil:
		// First frame: build the model over every channel known now.
		if err := u.build(); err != nil {
			u.failed = err
			u.p.log.Error("unit is not monitored", "unit", u.Name, "err", err)
			return
		}
	case len(u.idx) > len(u.x):
		u.grow() // channels discovered since
	}
	observed := f.Gather(u.x, u.miss, nil, u.idx)
	if u.seedAt != nil {
		observed += u.carrySeeds(f)
	}
	u.augment()
	u.syncContext()
	if u.nCtx > 0 {
		observed = u.ownObserved()
	}
	u.screenFrame()
	if observed == 0 {
		u.empty++
		// Silent: the unit had readings in this run and lost them, or has
		// had none for longer than the staleness since the run began (the
		// first frames of a run may precede a unit's first reading).
		if !u.lastT.IsZero() || f.Start.Sub(u.p.first) > u.p.stale {
			u.pending = pendSilent
		}
		return
	}
	if u.states != nil && !u.enterState(f) {
		return // no operating state yet
	}
	want := u.fixed || u.alertFrozen.Load()
	if want != u.frozen {
		if want {
			u.tr.Freeze()
		} else {
			u.tr.Thaw()
		}
		u.frozen = want
	}
	// A refresh of the modes and limits happens inside the Step that
	// learns the last frame before it is due (NextRefresh == 1 before).
	refreshDue := !u.frozen && u.score.NextRefresh == 1
	t0 := time.Now()
	u.tr.SetMewmaScale(u.mewmaRel())
	u.tr.SetCreepScale(u.creepRel())
	if u.screen.StatusChanged() {
		u.tr.ResetLevelSteps() // a status moved: the relations before may differ
	}
	err := u.tr.StepMasked(&u.score, u.x, u.miss, u.lagMask(u.learnMask()))
	if err == nil {
		u.levelSteps()
	}
	if refreshDue && err == nil {
		u.refreshes++
		u.lastRefresh = time.Since(t0)
	}
	if u.drivers != nil && err == nil {
		u.scoreDrivers(refreshDue)
	}
	if u.states != nil && u.states.auto != nil && err == nil {
		u.posteriorScore() // found states: posterior-weighted statistics (bipstates.go)
	}
	if u.autoBuf != nil && err == nil {
		u.autoBuf.add(u.x, u.miss)
		if u.autoBuf.gate != nil && !u.autoBuf.gate.screen(u.x, u.miss) {
			u.autoBuf = nil // no channel can be a status channel: keep no frames
		}
	}
	if err != nil {
		u.stepErrors++
		if u.stepErrors <= 10 {
			u.p.log.Warn("frame not scored", "unit", u.Name, "time", f.Start, "err", err)
		}
		return
	}
	u.frames++
	if u.states != nil {
		m := u.states.models[u.states.cur]
		if m.frames++; m.learnFrames > 0 && m.frames == m.learnFrames {
			u.stateLearned(f.Start)
		}
	}
	if u.firstT.IsZero() {
		u.firstT = f.Start
	}
	u.lastT = f.Start
	u.keepLast(f)
	u.pending = pendScored
}

// levelSteps hands the tracker's level steps of the frame just scored to
// the screen and, in fit, to the profiler. It allocates only when the
// unit's width grew.
func (u *Unit) levelSteps() {
	w := u.tr.P()
	if len(u.lvl) < w {
		u.lvl = make([]float64, w)
	}
	ok := u.tr.LevelStepsTo(u.lvl)
	// Outside the operating region the model has seen (T² over its
	// limit) its conditional expectations extrapolate: a move of the
	// operating point steps the residuals of the channels it reaches
	// beyond the range of their relation, which is not a shift of one
	// reading.
	if s := &u.score; s.Ready && s.T2Limit > 0 && s.T2 > s.T2Limit {
		ok = false
	}
	p := len(u.names) // lagged columns after the channels are not judged
	u.screen.SetLevelSteps(u.lvl[:p], ok, 2*u.tr.Config().LevelStep)
	if u.learn != nil {
		u.learn.addLevel(u.lvl[:p], ok)
	}
}

// levelSizes gives each level shift of q its size in the channel's unit
// (tracker.LevelStepOf): the means of the two windows and the step the
// other channels do not explain. No allocation.
func (u *Unit) levelSizes(q []alerts.Quality) {
	for j := range q {
		if q[j].Kind != alerts.QualityLevelShift {
			continue
		}
		i := slices.Index(u.names, q[j].Channel)
		if i < 0 {
			continue
		}
		b, a, st, ok := u.tr.LevelStepOf(i)
		if !ok {
			continue
		}
		q[j].Before, q[j].After, q[j].Step, q[j].Level = b, a, st, true
		q[j].Window = time.Duration(u.tr.Config().LevelStep) * u.p.opt.Period
	}
}

// What finish hands on after learn.
const (
	pendNone   = iota
	pendSilent // the unit lost its readings: a silent observation
	pendScored // a score: an observation and OnScore
)

// finish hands what stepModel left to the alarm engine and to OnScore. The
// finish calls of one frame run one after the other in unit order,
// whatever the number of workers, so that alert records come out in the
// same order as from a single worker. Called under p.mu.
func (u *Unit) finish(f *stream.Frame) {
	switch u.pending {
	case pendSilent:
		u.observeSilent(f.Start)
	case pendScored:
		u.observe(f.Start)
		if u.p.opt.OnScore != nil {
			u.p.opt.OnScore(u, f.Start)
		}
	}
	u.pending = pendNone
}

// parallel reports whether stepModel may run on a worker: it then touches only
// the unit's own state. A unit with operating states tells the alarm
// engine about new states from inside stepModel, so it is stepped whole, in
// unit order (see Pipeline.Frame).
func (u *Unit) parallel() bool { return u.states == nil }

// noReading marks a channel without a carried reading in lastAt.
const noReading = stream.NoReading

// keepLast records the unit's channels' values and reading times in f, the
// frame just scored. It allocates only when the unit's channels changed.
func (u *Unit) keepLast(f *stream.Frame) {
	if len(u.lastAt) != len(u.idx) {
		u.lastV = slices.Grow(u.lastV[:0], len(u.idx))[:len(u.idx)]
		u.lastAt = slices.Grow(u.lastAt[:0], len(u.idx))[:len(u.idx)]
	}
	f.Gather(u.lastV, nil, u.lastAt, u.idx)
	end := u.seedEnd(f)
	for k := range u.seedAt {
		if use, _ := u.seeded(k, f, end); use {
			u.lastV[k], u.lastAt[k] = u.seedV[k], u.seedAt[k]
		}
	}
}

// ModelState returns the unit's model state in the alarm engine's terms.
func (u *Unit) ModelState() string {
	ready := u.score.Ready
	if u.tr != nil && u.score.Frame == 0 {
		// restored (checkpoint, fitted model), no frame scored yet
		ready = u.tr.State() != tracker.StateWarmUp
	}
	switch {
	case u.tr == nil || !ready:
		return alerts.ModelWarmup
	case u.fixed:
		return alerts.ModelBaseline
	case u.frozen:
		return alerts.ModelFrozen
	}
	return alerts.ModelAdapting
}

// observe hands the latest score to the alarm engine.
func (u *Unit) observe(t time.Time) {
	o := &u.p.obs
	s := &u.score
	o.Unit, o.Time = u.Name, t
	o.ModelState = u.ModelState()
	o.TakingIn = u.recentK < recentreFrames && len(u.recent) == len(u.x)
	o.Stats = o.Stats[:0]
	o.Contributors = o.Contributors[:0]
	o.Missing = o.Missing[:0]
	o.Quality = o.Quality[:0]
	o.Location = o.Location[:0]
	o.Beyond = o.Beyond[:0]
	if s.Ready {
		u.frameStats(s)
	}
	// In the hold-off after an operating-state switch the frame is scored
	// and shown but its statistics start no incident (and the budget
	// calibration does not see them).
	hold := u.states != nil && u.states.inHoldOff()
	if hold {
		u.last = u.last[:0]
	}
	if s.Ready && !hold {
		o.Location = u.location(o.Location)
		o.Stats = u.appendStats(o.Stats)
		for _, c := range s.Contrib {
			if u.isContext(c.Channel) {
				continue // a driver from another unit is never blamed here
			}
			if u.lag != nil && u.listed(o.Contributors, u.base(c.Channel)) {
				continue // a lagged column whose channel is ranked already
			}
			o.Contributors = append(o.Contributors, alerts.Contributor{
				Channel: u.names[u.base(c.Channel)], Share: c.Share, RBC: c.RBC, Limit: c.RBCLimit, Modes: c.Modes,
				Reading: c.Reading, Expected: c.Expected, Band: c.Band, BandCoverage: tracker.BandCoverage,
			})
		}
		u.leadRelation(o, s)
		o.Beyond = u.appendBeyond(o.Beyond[:0])
	}
	for _, i := range s.Missing {
		if i < len(u.names) && u.screen.MissingAlarm(i) && !u.isContext(i) {
			o.Missing = append(o.Missing, u.names[i])
		}
	}
	o.Quality = u.screen.AppendQuality(o.Quality)
	u.levelSizes(o.Quality)
	if u.gap.Swap(false) {
		o.Quality = append(o.Quality, alerts.Quality{Channel: IntakeChannel, Kind: alerts.QualityIntakeGap})
	}
	if s.Ready {
		// Before a channel has the warm-up frames its variance is not yet
		// estimated, so "stuck" is only reported once scoring starts and,
		// for a channel that joined later (Score.Warming, or excluded
		// while its first frames repeat a value), once it has them too.
		// Warming channels are no quality alarm. (A model held fixed
		// learns nothing more: its channels are judged as they are.)
		warm := float64(u.tr.Config().WarmUp)
		for _, i := range s.Excluded {
			if i >= len(u.names) {
				continue // a lagged column: its channel at lag 0 is judged
			}
			if u.screen.Profiled(i) {
				continue // judged by its profile (AppendQuality)
			}
			if !u.fixed && u.tr.Stats().Count(i) < warm {
				continue
			}
			o.Quality = append(o.Quality, alerts.Quality{Channel: u.names[i], Kind: alerts.QualityStuck})
		}
	}
	if err := u.p.alerts.Observe(o); err != nil {
		u.p.log.Warn("alarm engine refused an observation", "unit", u.Name, "time", t, "err", err)
	}
}

// Score returns the unit's latest score (valid only from the frame
// goroutine or after the input has ended).
func (u *Unit) Score() *tracker.Score { return &u.score }

// Counters returns frames scored, frames with every channel missing, and
// frames the tracker refused.
func (u *Unit) Counters() (frames, empty, stepErrors uint64) { return u.frames, u.empty, u.stepErrors }

// Err returns why the unit is not monitored, or nil.
func (u *Unit) Err() error { return u.failed }
