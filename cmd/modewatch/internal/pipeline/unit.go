package pipeline

import (
	"fmt"
	"math"
	"sync"
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
	idx   []int    // registry index of each model channel
	names []string // channel names, same order

	tr    *tracker.Tracker
	x     []float64
	miss  []bool
	score tracker.Score

	fixed         bool        // adapt=false: the model never learns
	equal         bool        // equal weights (fit without a half-life)
	skipUntil     time.Time   // frames up to this start were scored before a restart
	firstT, lastT time.Time   // first and last frame scored
	fixedChannels bool        // the channel list is settled (baseline, checkpoint, out of warm-up)
	baseline      bool        // started from a fitted model
	alertFrozen   atomic.Bool // set by the alarm engine
	frozen        bool        // the tracker is frozen now
	failed        error       // the model could not be built; the unit is not scored

	// Counters, under p.mu.
	frames      uint64 // frames scored
	empty       uint64 // frames with every channel of the unit missing
	stepErrors  uint64
	skipped     uint64        // frames already scored before a restart
	refreshes   uint64        // mode refreshes timed (see step)
	lastRefresh time.Duration // wall time of the last frame step that refreshed
	late        []string      // channels that appeared after the model was built (not modelled)

	// Snapshot for concurrent readers.
	viewMu sync.Mutex
	view   UnitView
}

func newUnit(p *Pipeline, name string) *Unit {
	m := p.cfg.ModelFor(name)
	return &Unit{Name: name, p: p, model: m, fixed: m.Adapt != nil && !*m.Adapt,
		equal: p.opt.Fit && !p.opt.FitHalfLife}
}

// addChannel gives registry channel i to the unit and reports whether it
// is modelled. A unit whose channel list is fixed (fitted baseline,
// restored checkpoint, or a model out of warm-up) only resolves the
// channels it knows; others are reported once and left out.
func (u *Unit) addChannel(i int, name string) bool {
	if u.fixedChannels {
		for k, n := range u.names {
			if n == name && u.idx[k] < 0 {
				u.idx[k] = i
				return true
			}
		}
		u.p.log.Warn("channel is not part of the unit's model; it is not modelled until the model is rebuilt (refit, or restart without checkpoint)",
			"unit", u.Name, "channel", name)
		u.late = append(u.late, name)
		return false
	}
	u.idx = append(u.idx, i)
	u.names = append(u.names, name)
	return true
}

// Channels returns the names of the unit's model channels.
func (u *Unit) Channels() []string { return append([]string(nil), u.names...) }

// Tracker returns the unit's tracker (nil before the first frame). It must
// only be used from the frame goroutine or after the input has ended.
func (u *Unit) Tracker() *tracker.Tracker { return u.tr }

// build creates the tracker over the unit's current channels.
func (u *Unit) build() error {
	cfg, err := TrackerConfig(u.model, u.p.opt.Period, len(u.idx), u.equal)
	if err != nil {
		return fmt.Errorf("pipeline: unit %s: %w", u.Name, err)
	}
	tr, err := tracker.New(len(u.idx), cfg)
	if err != nil {
		return fmt.Errorf("pipeline: unit %s (%d channels): %w", u.Name, len(u.idx), err)
	}
	u.tr = tr
	u.x = make([]float64, len(u.idx))
	u.miss = make([]bool, len(u.idx))
	u.frozen = false
	u.p.log.Info("unit model built", "unit", u.Name, "channels", len(u.idx), "sparsity", u.model.Sparsity,
		"modes", u.model.Modes.String(), "halflife", u.model.HalfLife, "warmup_frames", u.model.WarmUp)
	return nil
}

// step scores frame f for this unit. Called under p.mu.
func (u *Unit) step(f *stream.Frame) error {
	if u.failed != nil {
		return nil
	}
	if !f.Start.After(u.skipUntil) && !u.skipUntil.IsZero() {
		u.skipped++
		return nil // scored before the restart
	}
	if u.tr == nil || len(u.idx) > len(u.x) {
		// First frame, or channels discovered during warm-up: (re)build
		// the model over every channel known now.
		if err := u.build(); err != nil {
			u.failed = err
			u.p.log.Error("unit is not monitored", "unit", u.Name, "err", err)
			return nil
		}
	}
	observed := 0
	for k, i := range u.idx {
		if i >= 0 && i < len(f.Values) && !f.Missing[i] {
			u.x[k], u.miss[k] = f.Values[i], false
			observed++
		} else {
			u.x[k], u.miss[k] = math.NaN(), true
		}
	}
	if observed == 0 {
		u.empty++
		return nil
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
	err := u.tr.Step(&u.score, u.x, u.miss)
	if refreshDue && err == nil {
		u.refreshes++
		u.lastRefresh = time.Since(t0)
	}
	if err != nil {
		u.stepErrors++
		if u.stepErrors <= 10 {
			u.p.log.Warn("frame not scored", "unit", u.Name, "time", f.Start, "err", err)
		}
		return nil
	}
	u.frames++
	if u.firstT.IsZero() {
		u.firstT = f.Start
	}
	u.lastT = f.Start
	if u.score.Ready {
		// Out of warm-up: the channel list is settled.
		u.fixedChannels = true
	}
	u.observe(f.Start)
	if u.p.opt.OnScore != nil {
		u.p.opt.OnScore(u, f.Start)
	}
	return nil
}

// ModelState returns the unit's model state in the alarm engine's terms.
func (u *Unit) ModelState() string {
	switch {
	case u.tr == nil || !u.score.Ready:
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
	o.Stats = o.Stats[:0]
	o.Contributors = o.Contributors[:0]
	o.Missing = o.Missing[:0]
	o.Quality = o.Quality[:0]
	if s.Ready {
		o.Stats = append(o.Stats,
			alerts.Stat{Name: alerts.StatT2, Value: s.T2, Limit: s.T2Limit},
			alerts.Stat{Name: alerts.StatSPE, Value: s.SPE, Limit: s.SPELimit},
			alerts.Stat{Name: alerts.StatPhi, Value: s.Phi, Limit: s.PhiLimit})
		for _, c := range s.Contrib {
			o.Contributors = append(o.Contributors, alerts.Contributor{
				Channel: u.names[c.Channel], Share: c.Share, RBC: c.RBC, Limit: c.RBCLimit, Modes: c.Modes,
			})
		}
	}
	for _, i := range s.Missing {
		o.Missing = append(o.Missing, u.names[i])
	}
	if s.Ready {
		// Before the model exists a channel's variance is not yet
		// estimated, so "stuck" is only reported once scoring starts.
		for _, i := range s.Excluded {
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
