// Package configs holds the configuration of the modewatch service: one
// Config struct whose zero value means "all defaults", loaded from YAML with
// every unknown key and bad value reported at once with its file:line:column,
// and checked by Validate.
//
// The YAML keys are the snake_case names given in the struct tags; the
// annotated example configs/modewatch.yaml documents every one of them.
// Durations are Go durations ("250ms", "15m", "1h30m") or a whole number of
// days ("7d").
//
// Zero values mean defaults: ApplyDefaults fills them in (Load does so before
// Validate), so a Config built in code may leave everything it does not care
// about empty.
package configs

import (
	"cmp"
	"reflect"
	"time"

	"modewatch/alerts"
	"modewatch/tracker"
	"modewatch/tracker/modes"
)

// Defaults used by ApplyDefaults when the corresponding field is zero.
const (
	DefaultStateDir           = "modewatch-data"
	DefaultPrefix             = "modewatch"
	DefaultClientName         = "modewatch"
	DefaultCheckpointInterval = 5 * time.Minute
	DefaultShutdownTimeout    = 15 * time.Second
	DefaultLogFormat          = "text"
	DefaultLogLevel           = "info"
	DefaultPrecision          = "ns"
	DefaultMaxChannels        = 10000
	// MaxChannelsCeiling bounds frames.max_channels: the channel registry
	// holds a name, a series key and a few counters per channel.
	MaxChannelsCeiling = 100000
	// DefaultUnitMaxChannels caps the channels of one unit's model. A
	// unit's model needs about UnitModelBytesSq·p² + UnitModelBytesLin·p
	// bytes, so 2000 channels take about 270 MB by that estimate, and with
	// one checkpoint being written or received beside it about 320 MB.
	DefaultUnitMaxChannels = 2000
	// UnitModelBytesSq and UnitModelBytesLin are the coefficients of a
	// unit's model size in bytes for p channels, UnitModelBytesSq·p² +
	// UnitModelBytesLin·p: the estimate the engine makes
	// (pipeline.UnitModelBytes, where they are measured and checked) and
	// the size max_channels is validated against. The linear term holds
	// the level steps' window ring at its largest (2·MaxLevelStepFrames
	// frames of p values, model.level_window at 6 min or more at a 1 s
	// period; at the default 5 min and 20 s, 15 frames).
	UnitModelBytesSq  = 62
	UnitModelBytesLin = 6000 + 16*tracker.MaxLevelStepFrames
	// UnitMaxChannelsCeiling bounds model.max_channels (about 6.3 GB).
	UnitMaxChannelsCeiling = 10000

	// DefaultSparsity is the sparse-mode constraint of every mode: an l0
	// constraint, at most K channels per mode (truncated power method).
	DefaultSparsity = "l0:6"
	// DefaultModes chooses the number of modes as the smallest r whose
	// adjusted variance reaches the given share of the total (common
	// practice for PCA monitoring is a 70-90 % cumulative-variance rule).
	DefaultModes = "auto:0.8"
	// DefaultMaxModes caps the automatic choice of the number of modes
	// (the tracker's).
	DefaultMaxModes = modes.DefaultMaxCount
	// DefaultHalfLife is the half-life of the exponential weights of the
	// online model: a frame's weight halves after this much event time.
	DefaultHalfLife = 7 * 24 * time.Hour
	// DefaultAlpha is the false-alarm rate of each control limit (per
	// frame; the tracker's).
	DefaultAlpha = tracker.DefaultAlpha
	// DefaultRefreshEvery is the number of frames between refreshes of the
	// sparse modes from the covariance (the tracker's).
	DefaultRefreshEvery = tracker.DefaultRefreshEvery
	// DefaultWarmUp is the number of frames learned before any score is
	// reported (the tracker's).
	DefaultWarmUp = tracker.DefaultWarmUp

	// DefaultOnDelayN and DefaultOnDelayM: an alarm goes active when a
	// statistic is over its limit in N of the last M frames.
	// (The alarm engine's.)
	DefaultOnDelayN = alerts.DefaultOnCount
	DefaultOnDelayM = alerts.DefaultOnWindow
	// DefaultOffDelay is how long a statistic must stay below its limit
	// (minus the deadband) before an active alarm returns to normal.
	DefaultOffDelay = alerts.DefaultOffDelay
	// DefaultDeadband is the fraction of the limit below it that the
	// statistic must fall to count as "back in" (hysteresis).
	DefaultDeadband = alerts.DefaultDeadband
	// DefaultFloodCount new alerts within DefaultFloodWindow make a flood
	// (ISA-18.2 / EEMUA 191: more than 10 alarms in 10 minutes per operator;
	// from memory).
	DefaultFloodCount  = alerts.DefaultFloodCount
	DefaultFloodWindow = alerts.DefaultFloodWindow
	// DefaultChatterCount activations within DefaultChatterWindow make an
	// alarm chattering (common practice: 3 or more activations a minute).
	DefaultChatterCount  = alerts.DefaultChatterCount
	DefaultChatterWindow = alerts.DefaultChatterWindow
	// DefaultDeliveryQueue is the bounded queue length of each alert
	// delivery target.
	DefaultDeliveryQueue = 1024
)

// Config is the whole configuration of one modewatch service instance.
type Config struct {
	// Server is the NATS message server to connect to; with no URLs the
	// service starts an embedded server on the loopback address.
	Server Server `yaml:"server"`
	// Intake is where readings come from (subjects, JetStream, files).
	Intake Intake `yaml:"intake"`
	// Channels is the channel map. Empty means auto-discovery: every
	// numeric field becomes a channel named measurement.tagvalues.field.
	Channels []Channel `yaml:"channels"`
	// Frames controls frame alignment.
	Frames Frames `yaml:"frames"`
	// Units lists the plant units, each with its channels and model
	// settings. Empty means one unit per measurement (auto-discovery).
	Units []Unit `yaml:"units"`
	// Model holds the default model settings of every unit.
	Model Model `yaml:"model"`
	// Alerts holds the alarm settings of every unit.
	Alerts Alerts `yaml:"alerts"`
	// Delivery is where alert records go besides the NATS alerts subject.
	Delivery Delivery `yaml:"delivery"`
	// HTTP is the HTTP API (health, metrics, units, alerts).
	HTTP HTTP `yaml:"http"`
	// StateDir holds checkpoints, the embedded server's JetStream store and
	// the delivery spools. Default [DefaultStateDir].
	StateDir string `yaml:"state_dir"`
	// CheckpointInterval is the time between checkpoints of every unit
	// (wall clock). Default [DefaultCheckpointInterval].
	CheckpointInterval time.Duration `yaml:"checkpoint_interval"`
	// ShutdownTimeout bounds a graceful shutdown. Default
	// [DefaultShutdownTimeout].
	ShutdownTimeout time.Duration `yaml:"shutdown_timeout"`
	// Log configures log/slog output.
	Log Log `yaml:"log"`
	// Cluster spreads the units over several instances (off unless
	// cluster.instance is set).
	Cluster Cluster `yaml:"cluster"`

	// Where each key was found, when loaded from a file (see Where).
	file string
	pos  map[string][2]int
}

// Server is the NATS connection. At most one of User/Password, Token,
// NKeySeedFile and CredentialsFile may be given.
type Server struct {
	// URLs of the NATS servers ("nats://host:4222"). Empty: embedded server.
	URLs []string `yaml:"urls"`
	// Name of the client connection, shown by the server. Default
	// [DefaultClientName].
	Name            string `yaml:"name"`
	User            string `yaml:"user"`
	Password        string `yaml:"password"`
	Token           string `yaml:"token"`
	NKeySeedFile    string `yaml:"nkey_seed_file"`
	CredentialsFile string `yaml:"credentials_file"`
	TLS             TLS    `yaml:"tls"`
	// Prefix of the subjects the service publishes on:
	// <prefix>.alerts.<unit>, <prefix>.scores.<unit>. Default [DefaultPrefix].
	Prefix string `yaml:"prefix"`
	// EmbeddedPort is the port of the embedded server (used only without
	// URLs). 0 picks the NATS default 4222; -1 picks a free port.
	EmbeddedPort int `yaml:"embedded_port"`
	// Users of the embedded server (only without URLs). With any, every
	// client must authenticate and may publish and subscribe only where
	// its user's permissions allow; the service connects as its own user.
	Users []NATSUser `yaml:"users"`
	// ControlPerUser: with an external server (urls), operators give
	// commands on <prefix>.control.<user> and the service records <user>
	// as "by"; that server's permissions must let each operator publish
	// on its own subject only. Always so with Users on the embedded server.
	ControlPerUser bool `yaml:"control_per_user"`
}

// TLS configures a TLS connection to the server: CA to verify it and an
// optional client certificate and key (both or neither).
type TLS struct {
	CA   string `yaml:"ca"`
	Cert string `yaml:"cert"`
	Key  string `yaml:"key"`
}

// Intake is where readings come from.
type Intake struct {
	// Subjects are core NATS subjects (wildcards allowed) carrying line
	// protocol. Default with no intake at all: "<prefix>.readings.>".
	Subjects []string `yaml:"subjects"`
	// JetStream, when Stream is set, reads through a durable consumer that
	// acknowledges only processed data.
	JetStream JetStream `yaml:"jetstream"`
	// Files are line-protocol files (plain or .gz) read in order; "-" is
	// standard input.
	Files []string `yaml:"files"`
	// StallExit: when no readings can be consumed for this long (NATS
	// connection down or refused, consumer gone and not recreated), the
	// service exits with status 1 so that a supervisor restarts it.
	// Default [DefaultStallExit]; "off" never exits (readiness still says so).
	StallExit StallExit `yaml:"stall_exit"`
	// Queue bounds the core-NATS messages waiting to be decoded; a message
	// beyond either bound is dropped and counted (JetStream slows intake
	// instead). Zero means the default of the message source
	// (natsource.DefaultQueueMsgs and natsource.DefaultQueueBytes).
	Queue Queue `yaml:"queue"`
}

// Queue bounds a queue by messages and by bytes.
type Queue struct {
	Messages int `yaml:"messages"`
	Bytes    int `yaml:"bytes"`
}

// JetStream names a stream and a durable consumer on it.
type JetStream struct {
	Stream  string `yaml:"stream"`
	Durable string `yaml:"durable"`
	// Subjects the stream captures when the service has to create it
	// (embedded server). Default: the Intake subjects.
	Subjects []string `yaml:"subjects"`
	// MaxAge and MaxBytes limit a stream the service creates: older
	// readings, and the oldest beyond the size, are removed by the
	// server. Defaults [DefaultStreamMaxAge] and [DefaultStreamMaxBytes]. An
	// existing stream keeps its own limits.
	MaxAge   time.Duration `yaml:"max_age"`
	MaxBytes int64         `yaml:"max_bytes"`
	// NoReset skips the consumer reset at start (for a durable shared
	// with another reader, or an account that may not reset consumers).
	// A server without the reset API is detected and skipped anyway.
	NoReset bool `yaml:"no_reset"`
}

// Channel is one entry of the channel map: which line-protocol series it
// reads and how it is shown and modelled.
type Channel struct {
	// Name is the channel's id, used in units, alerts and the API.
	// Default: measurement.tagvalues.field as with auto-discovery.
	Name        string            `yaml:"name"`
	Measurement string            `yaml:"measurement"`
	Tags        map[string]string `yaml:"tags"`
	Field       string            `yaml:"field"`
	Display     string            `yaml:"display"`
	// EngUnit is the engineering unit of the value, e.g. "degC", "L/min".
	EngUnit string `yaml:"eng_unit"`
	// Min and Max bound the valid range; a value outside is treated as
	// missing and counted. Empty means unbounded.
	Min *float64 `yaml:"min"`
	Max *float64 `yaml:"max"`
	// Model says whether the channel takes part in the model. Default true.
	Model *bool `yaml:"model"`
	// BoolAsNumber maps boolean fields to 0/1 instead of ignoring them.
	BoolAsNumber bool `yaml:"bool_as_number"`
	// Unit is the plant unit the channel belongs to. Default: the unit
	// listing it in Units, else the measurement.
	Unit string `yaml:"unit"`
}

// Frames controls frame alignment.
type Frames struct {
	// Period of a frame. 0: inferred from the data (median spacing).
	Period time.Duration `yaml:"period"`
	// Staleness: a channel's latest value older than this is missing.
	// Default: the aligner's (stream.AlignConfig).
	Staleness time.Duration `yaml:"staleness"`
	// Lateness allowed after a frame's end before it is emitted; data
	// arriving later is counted as late and dropped. Default: the
	// aligner's (stream.AlignConfig).
	Lateness time.Duration `yaml:"lateness"`
	// ClockJump: a gap in event time over this ends the segment. Default:
	// the aligner's (stream.AlignConfig).
	ClockJump time.Duration `yaml:"clock_jump"`
	// Precision of line-protocol timestamps: ns, us, ms or s. Default
	// [DefaultPrecision].
	Precision string `yaml:"precision"`
	// MaxChannels caps auto-discovery. Default [DefaultMaxChannels].
	MaxChannels int `yaml:"max_channels"`
}

// Unit is one part of the plant with its own channels and model.
type Unit struct {
	Name string `yaml:"name"`
	// Channels by name (channel map names or auto-discovered names). A
	// channel belongs to exactly one unit.
	Channels []string `yaml:"channels"`
	// Model overrides the default model settings for this unit; empty
	// fields inherit Config.Model.
	Model Model `yaml:"model"`
	// Alerts overrides the default alarm settings for this unit.
	Alerts Alerts `yaml:"alerts"`
	// State names the unit's operating-state channel (any channel, of this
	// unit or another): each of its distinct values, or with StateBands
	// each band of its values, is one operating state with a model of its
	// own. StateAuto lets fit find the states from the normal log (a
	// Gaussian mixture on the leading mode scores, the number of states by
	// BIC). Empty: fit splits the unit by a status channel of its own
	// when one is clear (a few integer values held for long runs, in one
	// of which another channel of the unit rests, as a stopped machine's
	// speed), else one model for all states. StateNone: one model.
	State string `yaml:"state"`
	// StateBands are ascending band edges of the state channel's values:
	// band 0 is below the first edge, band i from edge i-1 (inclusive) to
	// edge i. Empty: each distinct value is a state.
	StateBands []float64 `yaml:"state_bands"`
	// Context lists channels of other units that drive this unit (an
	// upstream header pressure): they enter the unit's model and explain
	// its variation, and are never named as contributors of its alerts.
	Context []string `yaml:"context"`
}

// Model holds the settings of a unit's online model. Zero fields mean
// "inherit" (in a unit) or "default" (in Config.Model).
type Model struct {
	// Sparsity of every mode:
	// none|l0:K|l1:S|l0pen:G|l1pen:G|l1sqrt:G|logpen:G[,EPS]|exppen:G[,EPS].
	// K above the unit's channel count (S above √p) is lowered to it.
	// Default [DefaultSparsity].
	Sparsity string `yaml:"sparsity"`
	// Modes: a fixed count "N" or "auto:SHARE" (smallest r reaching that
	// share of the total variance). Default [DefaultModes].
	Modes ModeCount `yaml:"modes"`
	// MaxModes caps the automatic choice. Default [DefaultMaxModes].
	MaxModes int `yaml:"max_modes"`
	// HalfLife of the exponential weights. Default [DefaultHalfLife].
	HalfLife time.Duration `yaml:"halflife"`
	// Alpha is the per-frame false-alarm rate of each limit, in (0, 0.5).
	// Default [DefaultAlpha].
	Alpha float64 `yaml:"alpha"`
	// Adapt says whether the model goes on learning. Default true.
	Adapt *bool `yaml:"adapt"`
	// Limits: "theory" (F / Box) or "empirical:FILE" (quantiles of a
	// reference log). Default theory.
	Limits Limits `yaml:"limits"`
	// RefreshEvery frames the sparse modes are refreshed. Default
	// [DefaultRefreshEvery].
	RefreshEvery int `yaml:"refresh_every"`
	// Robust is the Huber constant of the bounded-influence learning
	// weight: a frame whose distance √(φ/φ_limit) exceeds it is learned
	// with weight robust/distance. Zero: the tracker's default
	// ([tracker.DefaultRobust]); negative:
	// every frame learned with full weight.
	Robust float64 `yaml:"robust"`
	// Persist is the constant of the persistence weight of learning, in
	// conditional standard deviations: while the smoothed frames stay
	// further than this from a relation the model holds (a slow drift
	// under the per-frame limits), frames are learned with weight
	// (persist/distance)², so the drift is not absorbed. Zero: the
	// tracker's default ([tracker.DefaultPersist]); negative: off. Not
	// applied while fitting.
	Persist float64 `yaml:"persist"`
	// ScoreLag: each frame is learned this long (plant time) after it was
	// scored, so a slow drift is scored against a model that has not yet
	// followed it (N-step-ahead scoring). Default 0.
	ScoreLag time.Duration `yaml:"score_lag"`
	// LevelShift turns on the level-shift rule: each channel's residual
	// given the others, its mean over the last LevelWindow against the
	// LevelWindow before, beyond alerts.LevelShiftFactor times the most
	// the normal log showed (a transmitter that shifts against its
	// relations: tracker.LevelStepsTo, alerts.QualityLevelShift). Default
	// [DefaultLevelShift].
	LevelShift *bool `yaml:"level_shift"`
	// LevelWindow is the plant time of each of the level-shift rule's two
	// windows (at least two frames, at most tracker.MaxLevelStepFrames).
	// Default [DefaultLevelWindow].
	LevelWindow time.Duration `yaml:"level_window"`
	// ResolutionFloor: no channel is standardized with a standard
	// deviation below this multiple of its resolution, the quantisation
	// step its data-quality profile learned in fit (a nearly constant
	// quantised reading would otherwise make one step many standard
	// deviations). Zero: the default (pipeline.DefaultResolutionFloor);
	// negative: no floor.
	ResolutionFloor float64 `yaml:"resolution_floor"`
	// DriverLevel is the significance level, in (0, 0.5), of the test
	// that keeps a context channel's slope in the regression that removes
	// the drivers' part of the unit's channels: a slope not significant
	// for the effective number of independent frames (serially correlated,
	// exponentially weighted) is set to 0 (tracker.Drivers). Default
	// [tracker.DefaultDriverLevel]; negative: every slope is kept
	// untested.
	DriverLevel float64 `yaml:"driver_level"`
	// Shrink shrinks the correlation of the standardized channels toward
	// the identity at every refresh, by an intensity from the sampling
	// variance of each correlation with the channels' serial correlation
	// (learned in fit) counted: "none", "whole" (one intensity for the
	// matrix) or "channel" (one per channel). Default [DefaultShrink].
	Shrink string `yaml:"shrink"`
	// WarmUp frames are learned before scores are reported. Default
	// [DefaultWarmUp] (the tracker's).
	WarmUp int `yaml:"warmup"`
	// File is a fitted model (from "modewatch fit") to start from.
	File string `yaml:"file"`
	// MaxChannels caps the channels of the unit's model; a channel beyond
	// it is refused, logged once and counted. Default
	// [DefaultUnitMaxChannels].
	MaxChannels int `yaml:"max_channels"`
	// Statistics lists the statistics whose alarms open an alert:
	// t2, spe, phi, res (residual Mahalanobis), var (per-channel
	// variance), rel (relation modes), mewma (multivariate EWMA of the
	// residual part, for small persistent shifts), creep (each channel's
	// smoothed residual against its own normal variance). Default
	// [DefaultStatistics].
	Statistics string `yaml:"statistics"`
	// MewmaLambda is the EWMA weight λ in (0, 1) of the mewma statistic
	// (a memory of about 1/λ frames). Default [tracker.DefaultMewmaLambda].
	MewmaLambda float64 `yaml:"mewma_lambda"`
	// CreepLambda is the EWMA weight λ in (0, 1) of the creep statistic
	// (a memory of about 1/λ frames). Default [tracker.DefaultCreepLambda].
	CreepLambda float64 `yaml:"creep_lambda"`
	// Smoothing is the EWMA weight λ in (0, 1) applied to each alarm
	// statistic's ratio to its limit before the alarm rule (a remedy for
	// serially correlated statistics); its threshold then comes from
	// alerts.budget. 0 (default) means no smoothing.
	Smoothing float64 `yaml:"smoothing"`
	// StateScoring is how a unit with found operating states (state:
	// auto) scores a frame: "posterior" (every state's model, weighted by
	// the frame's posterior probability of the state; Yu & Qin 2008) or
	// "most_probable" (the most probable state's model alone). Default
	// [tracker.DefaultStateScoring].
	StateScoring string `yaml:"state_scoring"`
	// Lags is the number of lagged copies of the channels the model sees
	// (dynamic modes, Ku, Storer & Georgakis 1995): each frame is modelled
	// with the Lags frames before it, so that a mode names sensor-and-lag
	// pairs. 0 (default) is the static model; at most tracker.MaxLags.
	// The unit's channels are then fixed at the first frame; context
	// channels and operating states turn it off for the unit (a warning
	// says so), empirical limits are not available, and an incident
	// accepted as normal does not widen or recentre its model.
	Lags int `yaml:"lags"`
}

// Alerts holds the alarm settings. Zero fields mean "inherit"/"default".
type Alerts struct {
	// Budget is the expected number of false alerts per unit per day that
	// fit calibrates each unit's thresholds to (by running the alarm rule
	// over held-out normal data). It wins over alpha: alpha then only
	// shapes the base limits that the calibrated scale multiplies.
	// Default [DefaultBudget]; negative turns the calibration off (the
	// limits stay those of alpha).
	Budget float64 `yaml:"budget"`
	// BudgetPerStatistic: the budget calibration gives every alarm
	// statistic its own scale, all at the same tail probability and the
	// whole rule at the budget, instead of one scale for all (which the
	// statistic with the heaviest tail sets, e.g. T² at a setpoint step a
	// short normal log never saw, blinding SPE and res). Default false:
	// on the realism suite it raised the false alerts of three plants
	// for one more detection (README, Validation).
	BudgetPerStatistic *bool `yaml:"budget_per_statistic"`
	// CalibrationFolds is the number of consecutive blocks fit cuts the
	// normal log into for the budget calibration (top level only: one
	// calibration serves every unit). 1: learn on the first half and
	// score the second; K ≥ 2: cross-fitting, every block scored by a
	// model learned on the other K − 1, so that the calibration sees the
	// whole log held out. Zero: DefaultCalibrationFolds.
	CalibrationFolds int `yaml:"calibration_folds"`
	// CalibrationShape is how the budget calibration takes the shape ξ of
	// the GEV of each unit's held-out block maxima (top level only: one
	// calibration serves every unit): [ShapeShared], one shape for all
	// the units fitted together, each with its own location and scale,
	// unless a likelihood-ratio test rejects a common shape; [ShapeOwn],
	// each unit its own. Empty: DefaultCalibrationShape.
	CalibrationShape string `yaml:"calibration_shape"`
	// CalibratePoints: the budget calibration leaves out of the alarm
	// rule's statistic the held-out excursions the new-operating-point
	// rule (new_point) would record as a notice, not an alert: T² and φ
	// on frames where no channel explains alerts.PointShare of the index,
	// unless they stay over the limit for alerts.PointSettle or follow an
	// earlier such excursion within accept_after. Unset:
	// DefaultCalibratePoints.
	CalibratePoints *bool `yaml:"calibrate_points"`
	// OnDelay: active when over the limit in N of the last M frames
	// (1 ≤ N ≤ M ≤ 64). Default [DefaultOnDelayN] of [DefaultOnDelayM].
	OnDelay OnDelay `yaml:"on_delay"`
	// OnSpan is the least plant time the default on-delay window spans: at
	// short frame periods M grows to cover it, and N in proportion
	// ([alerts.SpanOnDelay]). Another on_delay is taken as given unless
	// on_span is set too. Zero: [alerts.DefaultOnSpan].
	OnSpan time.Duration `yaml:"on_span"`
	// OffDelay: time below limit minus deadband before going back to normal.
	// Default [DefaultOffDelay].
	OffDelay time.Duration `yaml:"off_delay"`
	// Deadband as a fraction of the limit, in [0, 1). Default
	// [DefaultDeadband].
	Deadband float64 `yaml:"deadband"`
	// Severity bands by ratio statistic/limit, ascending. Default: the
	// bands of [DefaultAlerts] (low, medium, high).
	Severity []SeverityBand `yaml:"severity"`
	// Flood: more than Count new alerts of a unit within Window are grouped
	// into one flood alert. Default [DefaultFloodCount] in
	// [DefaultFloodWindow].
	Flood RateRule `yaml:"flood"`
	// Chatter: Count activations of one alarm within Window make it
	// chattering (suppressed and reported). Default [DefaultChatterCount]
	// in [DefaultChatterWindow].
	Chatter RateRule `yaml:"chattering"`
	// FreezeOnAlert freezes a unit's learning while an alert is active.
	// Default true.
	FreezeOnAlert *bool `yaml:"freeze_on_alert"`
	// LearnAroundAlert: while an alert is active the unit goes on
	// learning with the alert's channels replaced by their reconstruction
	// from the others, instead of freezing all learning. Default true;
	// needs freeze_on_alert true (false learns everything, faults too).
	LearnAroundAlert *bool `yaml:"learn_around_alert"`
	// IncidentsPerLocation: a fault in other equipment of a unit already
	// in alarm is a new incident of its own. Default true; false keeps one
	// model incident per unit.
	IncidentsPerLocation *bool `yaml:"incidents_per_location"`
	// AcceptAfter is the bounded hold: an incident whose statistics stay
	// flat (no growth) this long of plant time is taken as the new normal
	// and its channels are learned again; it is the longest a flat
	// incident stays open (accepted that early that it has closed by
	// then, ended there otherwise). Zero: the alarm engine's default
	// ([alerts.DefaultAcceptAfter], chosen on the realism suite); a very
	// long one (8760h) in effect never.
	AcceptAfter time.Duration `yaml:"accept_after"`
	// BeyondIncidents: while a unit has open incidents, each frame is also
	// scored with their channels reconstructed from the others (Dunia &
	// Qin 1998); when a statistic stays over its limit so, the leading
	// channel of that score, if outside every open location, feeds the
	// on-delay of a new incident (a second fault the first hides). It
	// needs locations narrow enough to leave channels to reconstruct
	// from. Default false (README, Validation: on the realism suite it
	// found no fault the defaults miss).
	BeyondIncidents *bool `yaml:"beyond_incidents"`
	// LocationQuiet: an incident whose location has had no channel over
	// its own contribution limit this long of plant time, while the unit
	// stays in alarm for another incident, ends. Zero: the alarm engine's
	// default ([alerts.DefaultLocationQuiet]).
	LocationQuiet time.Duration `yaml:"location_quiet"`
	// ReopenWithin: a model incident that returned to normal re-opens
	// under its id, instead of a new alert, when its unit goes into alarm
	// again within this time of plant time on a frame that names no place
	// of its own (see specific_share): the same unit-wide disturbance
	// re-alarming. Zero: the alarm engine's default
	// ([alerts.DefaultReopenWithin]); a very short one (1s) in effect never.
	ReopenWithin time.Duration `yaml:"reopen_within"`
	// SpecificShare: a frame names a place of its own (may open an
	// incident at a new location of a unit in alarm) only when its leading
	// channel alone explains at least this share of the index (its
	// reconstruction-based contribution over the index). Zero: the alarm
	// engine's default ([alerts.DefaultSpecificShare]); a tiny one
	// (1e-9) in effect every frame with a channel over its limit.
	SpecificShare float64 `yaml:"specific_share"`
	// AcceptWeight is the weight of an accepted incident's state in the
	// unit's normal experience: the state joins the learned covariance
	// beside the old normal, so the incident closes and a return to the
	// old operating point raises nothing. Zero: the engine's default
	// (pipeline.DefaultAcceptWeight); negative: the means of the accepted
	// channels move to their current level instead.
	AcceptWeight float64 `yaml:"accept_weight"`
	// NewPoint: a model alarm of T² (and φ) alone, spread over the unit's
	// channels (no channel explaining alerts.PointShare of it), with SPE
	// and the residual statistics within their limits, is a new operating
	// point, not an alert: one informational record, and the point is
	// learned as normal at once; it becomes an alert if a residual
	// statistic joins, one channel comes to explain the excess, or T² is
	// not back within alerts.PointSettle. Unset: the alarm engine's
	// default, alerts.DefaultNewPoint.
	NewPoint *bool `yaml:"new_point"`
	// NewPointRes: where a unit scores the residual Mahalanobis statistic
	// res, the new-operating-point rule judges a break of the relations by
	// res alone and reads SPE and φ over their limits, with T² and res
	// within theirs and no channel explaining alerts.specific_share of the
	// index, as a move of the unit along relations it learned
	// (alerts/newpointres.go). Unset: the alarm
	// engine's default, alerts.DefaultPointByResidual.
	NewPointRes *bool `yaml:"new_point_res"`
	// SpreadRestartsHold: a growth of an incident's location (a channel
	// outside it leading the incident's frames) restarts its bounded hold,
	// as a growth of its statistics does. Unset: the alarm engine's
	// default, alerts.DefaultSpreadRestartsHold.
	SpreadRestartsHold *bool `yaml:"spread_restarts_hold"`
}

// OnDelay is the "N of the last M frames" rule.
type OnDelay struct {
	N int `yaml:"n"`
	M int `yaml:"m"`
}

// SeverityBand names the severity of an alert whose statistic is at least
// Ratio times its limit.
type SeverityBand struct {
	Name  string  `yaml:"name"`
	Ratio float64 `yaml:"ratio"`
}

// RateRule is "Count events within Window".
type RateRule struct {
	Count  int           `yaml:"count"`
	Window time.Duration `yaml:"window"`
}

// Delivery is where alert records go, besides <prefix>.alerts.<unit>.
type Delivery struct {
	// Stdout writes JSON lines to standard output.
	Stdout bool `yaml:"stdout"`
	// File appends JSON lines to this file.
	File string `yaml:"file"`
	// Subject publishes each record to this extra NATS subject.
	Subject string `yaml:"subject"`
	// Webhook posts each record to this http(s) URL with retries.
	Webhook string `yaml:"webhook"`
	// SpoolDir keeps records a delivery target could not take yet.
	// Default <state_dir>/spool.
	SpoolDir string `yaml:"spool_dir"`
	// Queue is the bounded queue length of each delivery target.
	// Default [DefaultDeliveryQueue].
	Queue int `yaml:"queue"`
}

// Log configures logging.
type Log struct {
	// Format: text or json. Default [DefaultLogFormat].
	Format string `yaml:"format"`
	// Level: debug, info, warn or error. Default [DefaultLogLevel].
	Level string `yaml:"level"`
}

// ApplyDefaults fills every zero field with its default. It is idempotent.
// Unit overrides are left empty (they inherit); use UnitModel and
// UnitAlerts for a unit's effective settings.
func (c *Config) ApplyDefaults() {
	c.Server.Name = cmp.Or(c.Server.Name, DefaultClientName)
	c.Server.Prefix = cmp.Or(c.Server.Prefix, DefaultPrefix)
	if len(c.Intake.Subjects) == 0 && c.Intake.JetStream.Stream == "" && len(c.Intake.Files) == 0 {
		c.Intake.Subjects = []string{c.Server.Prefix + ".readings.>"}
	}
	if c.Intake.JetStream.Stream != "" && len(c.Intake.JetStream.Subjects) == 0 {
		c.Intake.JetStream.Subjects = append([]string(nil), c.Intake.Subjects...)
		if len(c.Intake.JetStream.Subjects) == 0 {
			c.Intake.JetStream.Subjects = []string{c.Server.Prefix + ".readings.>"}
		}
	}
	c.applyIntakeDefaults()
	c.Frames.Precision = cmp.Or(c.Frames.Precision, DefaultPrecision)
	c.Frames.MaxChannels = cmp.Or(c.Frames.MaxChannels, DefaultMaxChannels)
	c.Model = c.Model.Over(DefaultModel())
	c.Alerts = c.Alerts.Over(DefaultAlerts())
	c.Delivery.Queue = cmp.Or(c.Delivery.Queue, DefaultDeliveryQueue)
	c.HTTP.applyDefaults()
	c.StateDir = cmp.Or(c.StateDir, DefaultStateDir)
	c.Delivery.SpoolDir = cmp.Or(c.Delivery.SpoolDir, c.StateDir+"/spool")
	c.CheckpointInterval = cmp.Or(c.CheckpointInterval, DefaultCheckpointInterval)
	c.ShutdownTimeout = cmp.Or(c.ShutdownTimeout, DefaultShutdownTimeout)
	c.Log.Format = cmp.Or(c.Log.Format, DefaultLogFormat)
	c.Log.Level = cmp.Or(c.Log.Level, DefaultLogLevel)
	c.applyClusterDefaults()
}

// defaultModeCount is DefaultModes parsed.
var defaultModeCount = func() ModeCount {
	m, err := ParseModeCount(DefaultModes)
	if err != nil {
		panic("configs: DefaultModes: " + err.Error())
	}
	return m
}()

// DefaultModel returns the default model settings.
func DefaultModel() Model {
	adapt, level := true, DefaultLevelShift
	return Model{
		LevelShift:   &level,
		LevelWindow:  DefaultLevelWindow,
		Sparsity:     DefaultSparsity,
		Modes:        defaultModeCount,
		MaxModes:     DefaultMaxModes,
		HalfLife:     DefaultHalfLife,
		Alpha:        DefaultAlpha,
		Adapt:        &adapt,
		Limits:       Limits{Method: LimitsTheory},
		RefreshEvery: DefaultRefreshEvery,
		WarmUp:       DefaultWarmUp,
		MaxChannels:  DefaultUnitMaxChannels,
		Statistics:   DefaultStatistics,
		MewmaLambda:  tracker.DefaultMewmaLambda,
		CreepLambda:  tracker.DefaultCreepLambda,
		StateScoring: tracker.DefaultStateScoring,
		DriverLevel:  tracker.DefaultDriverLevel,
		Shrink:       DefaultShrink,
	}
}

// DefaultAlerts returns the default alarm settings.
func DefaultAlerts() Alerts {
	freeze, point, calPoints, spread := true, alerts.DefaultNewPoint, DefaultCalibratePoints, alerts.DefaultSpreadRestartsHold
	pointRes := alerts.DefaultPointByResidual
	return Alerts{
		Budget:   DefaultBudget,
		OnDelay:  OnDelay{N: DefaultOnDelayN, M: DefaultOnDelayM},
		OffDelay: DefaultOffDelay,
		Deadband: DefaultDeadband,
		Severity: []SeverityBand{
			{Name: "low", Ratio: 1},
			{Name: "medium", Ratio: 2},
			{Name: "high", Ratio: 4},
		},
		Flood:            RateRule{Count: DefaultFloodCount, Window: DefaultFloodWindow},
		Chatter:          RateRule{Count: DefaultChatterCount, Window: DefaultChatterWindow},
		FreezeOnAlert:    &freeze,
		NewPoint:         &point,
		NewPointRes:      &pointRes,
		CalibrationFolds: DefaultCalibrationFolds,
		CalibrationShape: DefaultCalibrationShape,
		CalibratePoints:  &calPoints,

		SpreadRestartsHold: &spread,
	}
}

// Values of Model.Shrink.
const (
	ShrinkNone    = "none"
	ShrinkWhole   = "whole"
	ShrinkChannel = "channel"
	// DefaultShrink is the default of model.shrink.
	DefaultShrink = ShrinkNone
)

// Over returns m with every zero field taken from base.
func (m Model) Over(base Model) Model {
	overZero(&m, base)
	return m
}

// Over returns a with every zero field taken from base.
func (a Alerts) Over(base Alerts) Alerts {
	overZero(&a, base)
	return a
}

// overZero sets every field of the struct *v that holds its zero value
// (an empty list counts as zero) to base's value of that field. A setting
// added to Model or Alerts is inherited with no line of its own here.
func overZero[T any](v *T, base T) {
	dst, src := reflect.ValueOf(v).Elem(), reflect.ValueOf(base)
	for i := range dst.NumField() {
		if f := dst.Field(i); f.IsZero() || (f.Kind() == reflect.Slice && f.Len() == 0) {
			f.Set(src.Field(i))
		}
	}
}

// UnitModel returns the effective model settings of unit i: its overrides
// over Config.Model over the defaults.
func (c *Config) UnitModel(i int) Model {
	return c.Units[i].Model.Over(c.Model.Over(DefaultModel()))
}

// UnitAlerts returns the effective alarm settings of unit i.
func (c *Config) UnitAlerts(i int) Alerts {
	return c.Units[i].Alerts.Over(c.Alerts.Over(DefaultAlerts()))
}

// Unit returns the index of the unit named name, or -1.
func (c *Config) Unit(name string) int {
	for i := range c.Units {
		if c.Units[i].Name == name {
			return i
		}
	}
	return -1
}

// ModelFor returns the effective model settings of the unit named name;
// an unknown unit (auto-discovered) gets Config.Model over the defaults.
func (c *Config) ModelFor(name string) Model {
	if i := c.Unit(name); i >= 0 {
		return c.UnitModel(i)
	}
	return c.Model.Over(DefaultModel())
}

// AlertsFor returns the effective alarm settings of the unit named name.
func (c *Config) AlertsFor(name string) Alerts {
	if i := c.Unit(name); i >= 0 {
		return c.UnitAlerts(i)
	}
	return c.Alerts.Over(DefaultAlerts())
}
