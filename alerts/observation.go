package alerts

import "time"

// Statistic names accepted in Stat.Name.
const (
	StatT2  = "t2"  // Hotelling's T² inside the mode subspace
	StatSPE = "spe" // squared prediction error (Q) outside it
	StatPhi = "phi" // combined index φ (Yue & Qin 2001)
	// StatResidual is the residual Mahalanobis statistic (the frame's
	// distance outside the modes, weighted by how tightly each residual
	// direction is normally held).
	StatResidual = "res"
	// StatVariance is the per-channel variance statistic (a channel's
	// smoothed squared residual against its normal level).
	StatVariance = "var"
	// StatRelation is the relation-mode statistic (the largest score of a
	// sparse tight relation among a few channels).
	StatRelation = "rel"
	// StatMewma is the multivariate EWMA statistic of the residual part
	// (small persistent shifts of a relation; Lowry et al. 1992).
	StatMewma = "mewma"
	// StatCreep is the creep statistic (each channel's smoothed
	// reconstruction residual against its own normal variance: small
	// persistent shifts of one relation).
	StatCreep = "creep"
)

// Data-quality kinds accepted in Quality.Kind.
const (
	QualityStuck      = "stuck"        // flat-lined channel
	QualityOutOfRange = "out_of_range" // outside its valid range
	QualityStale      = "stale"        // no fresh value within the staleness limit
	QualityMissing    = "missing"      // missing (also derived from Observation.Missing)
	// QualityIntakeGap: readings may be lost upstream of the unit (the
	// readings consumer or stream was deleted and recreated); Channel
	// names the intake rather than one channel.
	QualityIntakeGap = "intake_gap"
)

// Model states accepted in Observation.ModelState.
const (
	ModelWarmup   = "warmup"
	ModelAdapting = "adapting"
	ModelFrozen   = "frozen"
	ModelBaseline = "baseline"
)

// Observation is what the alerts engine sees of one scored frame of one
// plant unit. cmd fills it from the tracker's score; the engine copies what
// it keeps, so the caller may reuse the Observation and its slices.
type Observation struct {
	// Unit is the plant unit the frame belongs to.
	Unit string
	// Time is the frame's event time; it drives every timer of the engine.
	Time time.Time
	// Stats are the monitoring statistics with their control limits.
	// Values and limits are in the statistic's own (dimensionless) units.
	Stats []Stat
	// Contributors are ranked by reconstruction-based contribution, largest
	// first (Alcala & Qin 2009).
	Contributors []Contributor
	// Missing names the channels missing in this frame.
	Missing []string
	// Quality lists the per-channel data-quality conditions present in this
	// frame.
	Quality []Quality
	// Location names the channels of this frame's location: those whose
	// contributions exceed their own limits, widened by the supports of
	// the modes that hold them (the caller computes it from the model). A
	// model incident opening on this frame is located there; empty means
	// the leading contributors (see location.go).
	Location []string
	// Beyond names the leading contributors of this frame scored once more
	// with the channels of the unit's open incidents reconstructed from
	// the others (the caller computes it from the model), given only when
	// a statistic of that score stays over its limit: a second fault that
	// the open incidents do not explain. Its first channel, when it lies
	// outside every open incident's location, feeds the on-delay of a new
	// incident (see location.go). Empty: none, or not computed.
	Beyond []string
	// ModelState is one of ModelWarmup, ModelAdapting, ModelFrozen,
	// ModelBaseline. In warm-up the statistics are ignored.
	ModelState string
	// TakingIn reports that the unit's model is taking in a new normal (an
	// accepted incident's channels or a new operating point, see Accepting
	// and Moving) and refreshes its modes and limits at the end: the
	// statistics of this frame are measured against a model in change.
	// A new operating point is not escalated on them (newpoint.go).
	TakingIn bool
}

// Stat is one monitoring statistic and its control limit.
type Stat struct {
	Name  string // StatT2, StatSPE, StatPhi, StatResidual, StatVariance, StatRelation, StatMewma or StatCreep
	Value float64
	Limit float64 // > 0; a frame with a non-finite or non-positive limit is skipped for this statistic
}

// Contributor is one channel's contribution to the frame's statistics.
type Contributor struct {
	Channel string
	Share   float64 // fraction of the total RBC, in [0, 1]
	RBC     float64 // reconstruction-based contribution
	Limit   float64 // control limit of the RBC (0 when unknown)
	Modes   []int   // the sparse modes whose support contains the channel
	// Reading, Expected and Band: the channel's value, the value the other
	// channels imply under the model and the half-width of its band at
	// coverage BandCoverage, in the channel's unit. They are used only
	// when BandCoverage is in (0, 1); Expected and Band may be NaN where
	// the channel cannot be reconstructed.
	Reading, Expected, Band float64
	BandCoverage            float64
}

// Quality is one data-quality condition of one channel in one frame.
type Quality struct {
	Channel string
	Kind    string // QualityStuck, QualityOutOfRange, QualityStale, QualityMissing, QualitySilent, QualitySpikes or QualityLevelShift
	// Value and Limit measure the condition where its kind has a measure
	// (QualityLevelShift: the channel's level step |sᵢ| and its threshold,
	// in standard deviations of its conditional residual); 0 otherwise.
	// The incident's peak is the frame of the largest Value/Limit.
	Value, Limit float64
	// Before and After are the channel's mean over the window before and
	// the window after a level step and Step the part of After − Before
	// that the other channels do not explain (sᵢ in the channel's unit),
	// all in the channel's engineering unit; used when Level is true.
	Before, After, Step float64
	Window              time.Duration // each window's span
	Level               bool
}
