package pipeline

import (
	"math"
	"time"

	"modewatch/alerts"
	"modewatch/tracker"
)

// ModeView describes one mode for people and JSON: its stable id, the
// channels of its support with their loadings, and its adjusted variance as
// a share of the unit's total variance (Zou, Hastie & Tibshirani 2006).
type ModeView struct {
	ID            int       `json:"id"`
	Channels      []string  `json:"channels"`
	Loadings      []float64 `json:"loadings"`
	VarianceShare float64   `json:"variance_share"`
}

// LimitsView holds the control limits of the base pattern (no channel
// missing) at the last refresh.
type LimitsView struct {
	Alpha float64  `json:"alpha"`
	T2    *float64 `json:"t2"`
	SPE   *float64 `json:"spe"`
	Phi   *float64 `json:"phi"`
	// ResidualDims is the dimension of the residual subspace (channels in
	// the model less modes) where SPE lives; 0 means SPE cannot alarm.
	ResidualDims int `json:"residual_dims"`
}

// ContributorView is one ranked channel of a score.
type ContributorView struct {
	Channel  string  `json:"channel"`
	Share    float64 `json:"share"`
	RBC      float64 `json:"rbc"`
	RBCLimit float64 `json:"rbc_limit"`
	Modes    []int   `json:"modes"`
	// Reading, Expected and Band: the channel's value, the value the
	// other channels imply under the model and the half-width of its band
	// at coverage BandCoverage, in the channel's unit (null where unknown).
	Reading      alerts.Number `json:"reading"`
	Expected     alerts.Number `json:"expected"`
	Band         alerts.Number `json:"band"`
	BandCoverage float64       `json:"band_coverage"`
}

// ScoreView is a unit's latest score. Statistics are null in warm-up.
type ScoreView struct {
	Time     time.Time `json:"time"`
	Ready    bool      `json:"ready"`
	T2       *float64  `json:"t2"`
	T2Limit  *float64  `json:"t2_limit"`
	SPE      *float64  `json:"spe"`
	SPELimit *float64  `json:"spe_limit"`
	Phi      *float64  `json:"phi"`
	PhiLimit *float64  `json:"phi_limit"`
	Missing  []string  `json:"missing"`
	Excluded []string  `json:"excluded"`
	// Warming lists channels that joined the unit after its model was
	// built and are learned but not yet in the model (no alarm: they are
	// not scored until they have the warm-up frames).
	Warming      []string          `json:"warming"`
	Contributors []ContributorView `json:"contributors"`
}

// UnitView is a consistent snapshot of one unit for the API and reports.
type UnitView struct {
	Name        string   `json:"name"`
	Channels    []string `json:"channels"`
	NotModelled []string `json:"not_modelled,omitempty"`
	ModelState  string   `json:"model_state"`
	Error       string   `json:"error,omitempty"`
	Frames      uint64   `json:"frames"`
	EmptyFrames uint64   `json:"empty_frames"`
	StepErrors  uint64   `json:"step_errors"`
	EffectiveN  float64  `json:"effective_samples"`
	// RefreshIterations is the solver iterations of the last mode refresh.
	RefreshIterations int `json:"refresh_iterations"`
	// Refreshes counts the mode refreshes seen; LastRefreshS is the wall
	// time of the frame step that did the last one, in seconds.
	Refreshes     uint64      `json:"refreshes"`
	LastRefreshS  float64     `json:"last_refresh_s"`
	Modes         []ModeView  `json:"modes"`
	Limits        *LimitsView `json:"limits"`
	Latest        *ScoreView  `json:"latest"`
	ActiveAlerts  int         `json:"active_alerts"`
	InMaintenance bool        `json:"maintenance"`
	// State is the unit's current operating state and States every state
	// with its own modes (absent for a unit with one model).
	State  string      `json:"state,omitempty"`
	States []StateView `json:"states,omitempty"`
	// StateChannel is the channel whose values are the states ("auto":
	// found by fit); HoldOffFrames the frames after a switch that start
	// no incident, InHoldOff whether the latest frame lies in them (or in
	// a new state still being learned).
	StateChannel  string `json:"state_channel,omitempty"`
	HoldOffFrames int    `json:"hold_off_frames,omitempty"`
	InHoldOff     bool   `json:"in_hold_off,omitempty"`
	// MaxChannels is the unit's channel cap; RefusedChannels counts the
	// channels refused at it, RefusedExamples names the first few.
	MaxChannels     int      `json:"max_channels"`
	RefusedChannels uint64   `json:"refused_channels"`
	RefusedExamples []string `json:"refused_examples,omitempty"`
	// MemoryBytes estimates the memory of the unit's models (UnitModelBytes
	// of its channel count, once per operating state).
	MemoryBytes int64 `json:"memory_bytes"`
}

func finite(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// modesView lists the unit's current modes.
func (u *Unit) modesView() []ModeView { return u.modesOf(u.tr) }

// modesOf lists the modes of tr, one of the unit's trackers.
func (u *Unit) modesOf(tr *tracker.Tracker) []ModeView {
	if tr == nil {
		return nil
	}
	ms := tr.Modes()
	total := ms.TotalVariance()
	out := make([]ModeView, 0, ms.Count())
	for j := 0; j < ms.Count(); j++ {
		m := ms.Mode(j)
		v := ModeView{ID: m.ID, Channels: make([]string, 0, len(m.Support)), Loadings: make([]float64, 0, len(m.Support))}
		for _, i := range m.Support {
			v.Channels = append(v.Channels, u.column(i))
			v.Loadings = append(v.Loadings, m.Loadings[i])
		}
		if total > 0 {
			v.VarianceShare = m.AdjustedVariance / total
		}
		out = append(out, v)
	}
	return out
}

// View returns a snapshot of the unit. Call it from the frame goroutine or
// through Pipeline.Views (which takes the pipeline's lock).
func (u *Unit) View(t time.Time) UnitView {
	v := UnitView{
		Name: u.Name, Channels: u.Channels(), NotModelled: append([]string(nil), u.notModelled...),
		ModelState: u.ModelState(), Frames: u.frames, EmptyFrames: u.empty, StepErrors: u.stepErrors,
		Modes: u.modesView(), State: u.CurrentState(), States: u.statesView(),
		MaxChannels: u.model.MaxChannels, RefusedChannels: u.refused, RefusedExamples: append([]string(nil), u.refusedEx...),
		MemoryBytes: u.memoryBytes(),
	}
	if s := u.states; s != nil {
		v.StateChannel, v.HoldOffFrames, v.InHoldOff = s.channel, s.holdOff, s.cur >= 0 && s.inHoldOff()
	}
	if u.failed != nil {
		v.Error = u.failed.Error()
	}
	if u.tr == nil {
		return v
	}
	s := &u.score
	v.EffectiveN = s.NEff
	v.RefreshIterations = u.tr.Modes().Iterations()
	v.Refreshes, v.LastRefreshS = u.refreshes, u.lastRefresh.Seconds()
	c2, cq, cp := u.statScale(slotT2), u.statScale(slotSPE), u.statScale(slotPhi)
	if s.Ready {
		v.Limits = &LimitsView{Alpha: u.tr.Config().Alpha, T2: finite(c2 * s.T2Limit), SPE: finite(cq * s.SPELimit), Phi: finite(cp * s.PhiLimit)}
	}
	sv := &ScoreView{Time: t, Ready: s.Ready, Missing: []string{}, Excluded: []string{}, Warming: []string{}, Contributors: []ContributorView{}}
	if s.Ready {
		sv.T2, sv.T2Limit = finite(s.T2), finite(c2*s.T2Limit)
		sv.SPE, sv.SPELimit = finite(s.SPE), finite(cq*s.SPELimit)
		sv.Phi, sv.PhiLimit = finite(s.Phi), finite(cp*s.PhiLimit)
		for _, c := range s.Contrib {
			sv.Contributors = append(sv.Contributors, ContributorView{
				Channel: u.column(c.Channel), Share: c.Share, RBC: c.RBC, RBCLimit: c.RBCLimit,
				Modes:   append([]int(nil), c.Modes...),
				Reading: alerts.Number(c.Reading), Expected: alerts.Number(c.Expected), Band: alerts.Number(c.Band),
				BandCoverage: tracker.BandCoverage,
			})
		}
	}
	// Channels at lag 0 only (model.lags: the lagged columns repeat them).
	for _, i := range s.Missing {
		if i < len(u.names) {
			sv.Missing = append(sv.Missing, u.names[i])
		}
	}
	for _, i := range s.Excluded {
		if i < len(u.names) {
			sv.Excluded = append(sv.Excluded, u.names[i])
		}
	}
	for _, i := range s.Warming {
		if i < len(u.names) {
			sv.Warming = append(sv.Warming, u.names[i])
		}
	}
	v.Latest = sv
	return v
}

// Views returns snapshots of every unit, sorted by name, with their alert
// counts.
func (p *Pipeline) Views() []UnitView {
	p.mu.Lock()
	units := p.Units()
	out := make([]UnitView, len(units))
	for i, u := range units {
		out[i] = u.View(p.last)
	}
	p.mu.Unlock()
	p.addAlertCounts(out)
	return out
}

// addAlertCounts fills the alert counters from the alarm engine.
func (p *Pipeline) addAlertCounts(views []UnitView) {
	cs := p.alerts.Counters(nil)
	for i := range views {
		for _, c := range cs {
			if c.Unit == views[i].Name {
				views[i].ActiveAlerts = c.Open
				views[i].InMaintenance = c.InMaint
			}
		}
	}
}
