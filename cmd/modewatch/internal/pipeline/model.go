package pipeline

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/store"
	"modewatch/configs"
	"modewatch/tracker"
	"modewatch/tracker/modes"
)

// TrackerConfig converts a unit's model settings into a tracker
// configuration for p channels (with model.lags L, for the p·(L+1)
// columns of the lagged frames, trackerWidth). With equal true the frames
// are weighted equally (no forgetting), as fit does by default.
//
// A cardinality above the channel count (l0:K with K > p, l1:S with
// S > √p) is lowered to it: a unit of 4 channels under the default l0:6
// gets dense modes rather than an error.
func TrackerConfig(m configs.Model, period time.Duration, p int, equal bool) (tracker.Config, error) {
	m = m.Over(configs.DefaultModel())
	p = trackerWidth(m, p)
	sp, err := modes.ParseSparsity(m.Sparsity)
	if err != nil {
		return tracker.Config{}, err
	}
	switch sp.Method {
	case modes.L0:
		sp.K = min(sp.K, p)
	case modes.L1:
		sp.S = math.Min(sp.S, math.Sqrt(float64(p)))
	}
	cfg := tracker.Config{
		Period:       period,
		HalfLife:     m.HalfLife,
		Alpha:        m.Alpha,
		RefreshEvery: m.RefreshEvery,
		WarmUp:       m.WarmUp,
		Modes: modes.Config{
			Sparsity: []modes.Sparsity{sp},
			Count:    min(m.Modes.Count, p),
			Share:    m.Modes.Share,
			MaxCount: min(max(m.MaxModes, m.Modes.Count), p),
		},
	}
	if equal {
		cfg.HalfLife = 0
	}
	st, err := configs.ParseStatistics(m.Statistics)
	if err != nil {
		return tracker.Config{}, err
	}
	cfg.Residual, cfg.Variance = st.Residual, st.Variance
	cfg.Mewma, cfg.MewmaLambda = st.Mewma, m.MewmaLambda
	cfg.Creep, cfg.CreepLambda = st.Creep, m.CreepLambda
	if st.Relation && p >= 3 {
		cfg.Relations = min(p/3, configs.MaxRelations)
	}
	return cfg, nil
}

// ModelFormat and ModelVersion identify a model file written by fit.
// Version 2 added each unit's data-quality profiles (ModelUnit.Quality);
// a version 1 file still loads, its channels judged by the rules without a
// profile, as when it was written. Version 3 added, in unit checkpoints,
// the recentring of an accepted incident's channels in progress
// (ModelUnit.Recentre); an older checkpoint loads with none in progress.
// Version 4 added, in unit checkpoints, the running state of the unit's
// data-quality screen (ModelUnit.Screen: flat runs, missing runs, recent
// spikes); an older checkpoint loads with that state empty, as a restart
// before version 4 began it (flat and missing runs and spike counts from
// zero).
const (
	ModelFormat  = "modewatch-model"
	ModelVersion = 4
	// modelVersionMin is the oldest version this program reads.
	modelVersionMin = 1
)

// ErrModelFile marks a model file that cannot be used: not a model file, a
// version this program does not read, or a damaged tracker state.
var ErrModelFile = errors.New("pipeline: unusable model file")

// ModelFile is a fitted model: per unit, its channels (by name, in model
// order), the settings it was fitted with and the tracker's state. JSON,
// with the tracker state as base64 of its versioned binary form.
type ModelFile struct {
	Format  string          `json:"format"`
	Version int             `json:"version"`
	Created time.Time       `json:"created"`
	Period  alerts.Duration `json:"period"`
	Frames  uint64          `json:"frames"`
	From    time.Time       `json:"from"`
	To      time.Time       `json:"to"`
	Units   []ModelUnit     `json:"units"`
}

// ModelUnit is one unit of a model file.
type ModelUnit struct {
	Name     string        `json:"name"`
	Channels []string      `json:"channels"`
	Settings ModelSettings `json:"settings"`
	Modes    []ModeView    `json:"modes"`
	Limits   LimitsView    `json:"limits"`
	// Calibration, when fit calibrated the unit to alerts.budget, scales
	// every alarm limit (absent: the limits of alpha).
	Calibration *Calibration `json:"calibration,omitempty"`
	State       []byte       `json:"state"`
	// Alerts is the unit's alarm state (alerts.Engine.SnapshotUnit) in a
	// unit checkpoint, captured between the same two frames as State, so
	// that the file alone carries the unit on; absent in fitted models.
	Alerts json.RawMessage `json:"alerts,omitempty"`
	// Last holds, in a unit checkpoint, the unit's channels present in
	// its last scored frame (the checkpoint's To): value and event time of
	// the reading the aligner carried, so that a restart seeds the aligner
	// with them (stream.Intake.SeedLast) and the first frames after it
	// carry them as an uninterrupted run would. Absent in fitted models
	// and in older checkpoints (then nothing is seeded).
	Last []LastReading `json:"last,omitempty"`
	// Quality holds the data-quality profile of each channel learned from
	// the normal log (fit), carried on by checkpoints; absent in version 1
	// files, whose channels are judged by the rules without a profile.
	Quality []alerts.ChannelProfile `json:"quality,omitempty"`
	// States holds one model per operating state of a unit with a state
	// channel (version 2); State then holds the state with most frames.
	States *StatesFile `json:"states,omitempty"`
	// Context names the unit's context channels (drivers from other
	// units) among Channels (version 2).
	Context []string `json:"context,omitempty"`
	// DriverSlopes is the regression on the context channels of the model
	// in State (context.go), so that a restart goes on with it.
	DriverSlopes []float64 `json:"driver_slopes,omitempty"`
	// DriverLags holds the lag-1 statistics of the test that keeps a
	// driver's slope (tracker.Drivers.Lags), so that a restart tests the
	// next regression as an uninterrupted run would; absent in files
	// written before the test (it then starts from none).
	DriverLags []float64 `json:"driver_lags,omitempty"`
	// Lagged holds, in a unit checkpoint with model.lags, the previous
	// frames of the lagged model (tracker.Lagged.MarshalBinary); absent in
	// fitted models (a restart from one starts with the lagged values
	// missing for model.lags frames).
	Lagged []byte `json:"lagged,omitempty"`
	// Smoothed holds, in a unit checkpoint with model.smoothing, each alarm
	// statistic's smoothed ratio at the checkpoint's last frame; absent in
	// fitted models and older checkpoints (the smoothing starts again).
	Smoothed []SmoothedStat `json:"smoothed,omitempty"`
	// Suggested lists channels of other units that explain a large share
	// of this unit's variance in the fitted log: candidates for Context.
	Suggested []ContextSuggestion `json:"context_suggested,omitempty"`
	// Recentre is, in a unit checkpoint (version 3), the recentring of
	// the channels of an incident just accepted as the new normal that is
	// still in progress at the checkpoint's last frame; absent when none
	// is.
	Recentre *RecentreState `json:"recentre,omitempty"`
	// Screen is, in a unit checkpoint (version 4), the running state of
	// the unit's data-quality screen at the checkpoint's last frame, per
	// channel that has any (alerts.Screen.AppendState): the current flat
	// run (stuck), missing run (missing hold) and recent readings and
	// spikes (spikes). Absent in fitted models and older checkpoints: the
	// runs then start empty.
	Screen []alerts.ChannelRun `json:"screen,omitempty"`
}

// LastReading is a channel's reading carried at a checkpoint's last frame.
type LastReading struct {
	Channel string    `json:"channel"`
	Value   float64   `json:"value"` // engineering unit
	Time    time.Time `json:"time"`  // event time of the reading (at or before the frame)
}

// ModelSettings records the settings a unit was fitted with. The tracker
// state can only be restored under exactly these settings, so replay and
// run use them for a fitted unit (HalfLife 0: equal weights).
type ModelSettings struct {
	Sparsity     string          `json:"sparsity"`
	Modes        string          `json:"modes"`
	MaxModes     int             `json:"max_modes"`
	HalfLife     alerts.Duration `json:"halflife"`
	Alpha        float64         `json:"alpha"`
	RefreshEvery int             `json:"refresh_every"`
	WarmUp       int             `json:"warmup"`
	Statistics   string          `json:"statistics,omitempty"`
	Smoothing    float64         `json:"smoothing,omitempty"`
	Lags         int             `json:"lags,omitempty"`
	// MewmaLambda is model.mewma_lambda (absent: the default).
	MewmaLambda float64 `json:"mewma_lambda,omitempty"`
	// CreepLambda is model.creep_lambda (absent: the default).
	CreepLambda float64 `json:"creep_lambda,omitempty"`
	// LevelWindow is model.level_window, the window the channels'
	// normal level steps (alerts.ChannelProfile.LevelStepMax) were
	// learned over (absent: the default).
	LevelWindow alerts.Duration `json:"level_window,omitempty"`
}

func settingsOf(m configs.Model) ModelSettings {
	return ModelSettings{
		Sparsity: m.Sparsity, Modes: m.Modes.String(), MaxModes: m.MaxModes, HalfLife: alerts.Duration(m.HalfLife),
		Alpha: m.Alpha, RefreshEvery: m.RefreshEvery, WarmUp: m.WarmUp, Statistics: m.Statistics, Smoothing: m.Smoothing, Lags: max(m.Lags, 0),
		MewmaLambda: m.MewmaLambda, CreepLambda: m.CreepLambda, LevelWindow: alerts.Duration(m.LevelWindow),
	}
}

func (s ModelSettings) model() (configs.Model, error) {
	mc, err := configs.ParseModeCount(s.Modes)
	if err != nil {
		return configs.Model{}, err
	}
	return configs.Model{
		Sparsity: s.Sparsity, Modes: mc, MaxModes: s.MaxModes, HalfLife: time.Duration(s.HalfLife),
		Alpha: s.Alpha, RefreshEvery: s.RefreshEvery, WarmUp: s.WarmUp, Statistics: s.Statistics, Smoothing: s.Smoothing, Lags: s.Lags,
		MewmaLambda: s.MewmaLambda, CreepLambda: s.CreepLambda, LevelWindow: time.Duration(s.LevelWindow),
	}, nil
}

// WriteModel writes the model file atomically.
func WriteModel(path string, m *ModelFile) error {
	b, err := json.MarshalIndent(m, "", "  ")
	if err != nil {
		return fmt.Errorf("pipeline: %w", err)
	}
	return store.WriteFile(path, append(b, '\n'), 0o644)
}

// ReadModel reads and checks a model file.
func ReadModel(path string) (*ModelFile, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("pipeline: %w", err)
	}
	m, err := DecodeModel(bytes.NewReader(b))
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return m, nil
}

// DecodeModel decodes a model file and checks its format and version.
func DecodeModel(r io.Reader) (*ModelFile, error) {
	var m ModelFile
	dec := json.NewDecoder(r)
	if err := dec.Decode(&m); err != nil {
		return nil, fmt.Errorf("%w: not a model file: %w", ErrModelFile, err)
	}
	if m.Format != ModelFormat {
		return nil, fmt.Errorf("%w: format %q, want %q", ErrModelFile, m.Format, ModelFormat)
	}
	if m.Version < modelVersionMin || m.Version > ModelVersion {
		return nil, fmt.Errorf("%w: version %d; this modewatch reads versions %d to %d", ErrModelFile, m.Version, modelVersionMin, ModelVersion)
	}
	if m.Period <= 0 {
		return nil, fmt.Errorf("%w: frame period %v", ErrModelFile, time.Duration(m.Period))
	}
	for i, u := range m.Units {
		if u.Name == "" || len(u.Channels) == 0 || len(u.State) == 0 {
			return nil, fmt.Errorf("%w: units[%d]: name, channels and state are required", ErrModelFile, i)
		}
	}
	return &m, nil
}

// unitFromModel creates a unit from a model unit (fitted baseline or
// checkpoint). The channels are resolved against the registry by name when
// they appear (see addChannel).
func (p *Pipeline) unitFromModel(mu *ModelUnit, period time.Duration) (*Unit, error) {
	if p.lookup(mu.Name) != nil {
		return nil, fmt.Errorf("%w: unit %q twice", ErrModelFile, mu.Name)
	}
	u, err := p.buildFromModel(mu, period)
	if err != nil {
		return nil, err
	}
	p.register(u)
	return u, nil
}

// buildFromModel is unitFromModel without registering the unit.
func (p *Pipeline) buildFromModel(mu *ModelUnit, period time.Duration) (*Unit, error) {
	if err := checkUnitCaps(mu, p.cfg.ModelFor(mu.Name).MaxChannels); err != nil {
		return nil, err // before the tracker allocates p² for it
	}
	settings, err := mu.Settings.model()
	if err != nil {
		return nil, fmt.Errorf("%w: unit %s: %v", ErrModelFile, mu.Name, err)
	}
	if err := mu.Calibration.check(); err != nil {
		return nil, fmt.Errorf("%w: unit %s: calibration: %v", ErrModelFile, mu.Name, err)
	}
	for i := range mu.Quality {
		if err := mu.Quality[i].Check(); err != nil {
			return nil, fmt.Errorf("%w: unit %s: quality profile %d (channel %.64q): %v", ErrModelFile, mu.Name, i, mu.Quality[i].Channel, err)
		}
	}
	// The tracker state holds only under the settings it was saved with;
	// whether it goes on learning comes from the configuration.
	adapt := p.cfg.ModelFor(mu.Name).Adapt
	equal := settings.HalfLife == 0
	cfg, err := TrackerConfig(settings, period, len(mu.Channels), equal)
	if err != nil {
		return nil, fmt.Errorf("%w: unit %s: %v", ErrModelFile, mu.Name, err)
	}
	lm := p.cfg.ModelFor(mu.Name) // the learning as configured, the level window the file's levels were learned over
	lm.LevelWindow = settings.LevelWindow
	p.learnSettings(&cfg, lm, period)
	if mu.States != nil {
		floorModes(&cfg, mu.States.MinModes) // the states' shared floor (statemodes.go)
	}
	tr, err := tracker.New(trackerWidth(settings, len(mu.Channels)), cfg)
	if err != nil {
		return nil, fmt.Errorf("%w: unit %s: %v", ErrModelFile, mu.Name, err)
	}
	if err := restoreState(tr, mu.State); err != nil {
		return nil, fmt.Errorf("%w: unit %s: %w", ErrModelFile, mu.Name, err)
	}
	u := newUnit(p, mu.Name)
	u.model = settings
	u.stats = alarmStats(settings)
	u.smooth = settings.Smoothing
	u.setCalibration(mu.Calibration)
	u.model.Adapt = adapt
	u.model.LevelShift = lm.LevelShift
	u.model.MaxChannels = p.cfg.ModelFor(mu.Name).MaxChannels
	u.fixed = adapt != nil && !*adapt
	u.equal = equal
	u.tr = tr
	u.frozen = tr.Frozen()
	u.baseline = true
	u.profile = mu.Quality
	for _, c := range mu.Context {
		if !slices.Contains(u.context, c) {
			u.context = append(u.context, c)
		}
	}
	u.states = nil
	u.restoreSlopes(tr, mu.DriverSlopes, mu.DriverLags)
	if mu.States != nil {
		if err := u.restoreStates(mu.States, len(mu.Channels), cfg); err != nil {
			return nil, fmt.Errorf("%w: unit %s: %v", ErrModelFile, mu.Name, err)
		}
	} else if i := p.cfg.Unit(mu.Name); i >= 0 && p.cfg.Units[i].State != "" && p.cfg.Units[i].State != configs.StateNone && !p.isAuto(mu.Name) {
		p.log.Warn("the unit's model was fitted without operating states; it is scored by its one model (fit again to use units[].state)",
			"unit", mu.Name, "state_channel", p.cfg.Units[i].State)
	}
	u.names = append([]string(nil), mu.Channels...)
	if err := u.newLagged(len(mu.Channels)); err != nil {
		return nil, fmt.Errorf("%w: %v", ErrModelFile, err)
	}
	if u.lag != nil && len(u.context) > 0 {
		p.log.Warn("the unit's model has lagged copies (model.lags), which do not combine with context channels; they are left out",
			"unit", mu.Name, "context", u.context)
		u.context = nil
	}
	if err := u.lag.UnmarshalBinary(mu.Lagged); err != nil && len(mu.Lagged) > 0 {
		return nil, fmt.Errorf("%w: unit %s: %v", ErrModelFile, mu.Name, err)
	}
	u.idx = make([]int, len(mu.Channels))
	for k := range u.idx {
		u.idx[k] = -1 // resolved against the registry by addChannel
	}
	u.floorScale(u.tr, mu.Quality)
	if u.states != nil {
		for _, m := range u.states.models {
			u.floorScale(m.tr, mu.Quality)
		}
	}
	return u, nil
}

func saveState(tr *tracker.Tracker) ([]byte, error) { return tr.MarshalBinary() }

func restoreState(tr *tracker.Tracker, b []byte) error { return tr.UnmarshalBinary(b) }

// Baseline turns the units of a fitted pipeline into a model file: each
// unit's model is refreshed once more from all the frames seen and frozen,
// and its state saved. Units without a model (no frames) are reported in
// the error and left out.
func (p *Pipeline) Baseline() (*ModelFile, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	m := &ModelFile{Format: ModelFormat, Version: ModelVersion, Created: time.Now().UTC(), Period: alerts.Duration(p.opt.Period),
		Frames: p.frames, From: p.first, To: p.last}
	var errs []error
	sug := p.suggestions()
	for _, u := range p.Units() {
		if u.tr == nil || u.failed != nil {
			errs = append(errs, fmt.Errorf("unit %s: no model (%v)", u.Name, u.failed))
			continue
		}
		var sf *StatesFile
		if u.autoBuf != nil && !p.isAuto(u.Name) {
			if ch := u.findGateStates(); ch != "" {
				p.log.Info("operating states by a status channel found", "unit", u.Name, "state_channel", ch, "states", len(u.states.models))
			}
		} else if u.autoBuf != nil {
			k, err := u.findStates()
			if err != nil {
				errs = append(errs, fmt.Errorf("unit %s: finding operating states: %w (fitted as one model)", u.Name, err))
			}
			p.log.Info("operating states found", "unit", u.Name, "states", k)
		}
		if u.states != nil {
			for _, sm := range u.states.models {
				sm.tr.ResetLevelSteps() // a replay starts after the normal log: no window across the gap
			}
			f, best, err := u.statesBaseline(true)
			if err != nil {
				errs = append(errs, fmt.Errorf("unit %s: %w", u.Name, err))
			}
			if best < 0 {
				continue
			}
			sf, u.tr = f, u.states.models[best].tr
		} else {
			u.floorScale(u.tr, u.Profiles()) // the final refresh forms A with the learned resolutions
			if err := u.tr.Refresh(); err != nil {
				errs = append(errs, fmt.Errorf("unit %s: %w", u.Name, err))
				continue
			}
		}
		u.tr.Freeze()
		u.frozen = true
		u.tr.ResetLevelSteps() // a replay starts after the normal log: no window across the gap
		state, err := saveState(u.tr)
		if err != nil {
			errs = append(errs, fmt.Errorf("unit %s: %w", u.Name, err))
			continue
		}
		settings := settingsOf(u.model)
		if u.equal {
			settings.HalfLife = 0
		}
		mu := ModelUnit{Name: u.Name, Channels: append([]string(nil), u.names...), Settings: settings,
			Modes: u.modesView(), Limits: u.baseLimits(), State: state, Quality: u.Profiles(), States: sf, Context: u.contextIn(), Suggested: sug[u.Name],
			DriverSlopes: u.driverSlopes(u.tr, true), DriverLags: u.driverLags(u.tr)}
		m.Units = append(m.Units, mu)
	}
	if len(m.Units) == 0 && len(errs) == 0 {
		errs = append(errs, ErrNoData)
	}
	return m, errors.Join(errs...)
}

// baseLimits evaluates the model at the channel means (nothing missing)
// to read the limits of the full problem.
func (u *Unit) baseLimits() LimitsView { return limitsOf(u.tr) }

// limitsOf reads the limits of the full problem of tr.
func limitsOf(tr *tracker.Tracker) LimitsView {
	x := make([]float64, tr.P())
	tr.Stats().MeanTo(x)
	var s tracker.Score
	lv := LimitsView{Alpha: tr.Config().Alpha, ResidualDims: tr.ResidualDims()}
	if err := tr.Evaluate(&s, x, nil); err == nil && s.Ready {
		lv.T2, lv.SPE, lv.Phi = finite(s.T2Limit), finite(s.SPELimit), finite(s.PhiLimit)
	}
	return lv
}
