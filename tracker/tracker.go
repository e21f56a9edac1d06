// Package tracker learns the normal joint behaviour of a plant unit's
// channels online and scores every frame against it.
//
// Per frame (Tracker.Step): the channels are standardized with their
// exponentially weighted (EW) means and variances, scored against the model
// of the last refresh — Hotelling's T² inside the span of the modes, the
// squared prediction error SPE (Q) outside it and the combined index φ of
// Yue & Qin (2001), each with a control limit at false-alarm rate α — and
// ranked per channel by reconstruction-based contribution (RBC, Alcalá &
// Qin 2009) with each channel's own RBC limit. Then, unless learning is
// frozen, the frame updates the EW statistics (Finch 2009). Every
// RefreshEvery frames the correlation matrix of the standardized channels
// is formed from the EW covariance and the sparse modes are refreshed from
// it, warm-started (package modes), and the limits are recomputed.
//
// With z the standardized frame, P (p × r) the mode loadings and A the
// correlation matrix at the last refresh:
//
//	t = Pᵀz,  T² = tᵀ(PᵀAP)⁻¹t                (valid for non-orthogonal sparse loadings)
//	SPE = ‖(I − P(PᵀP)⁻¹Pᵀ)z‖²
//	φ = SPE/δ² + T²/τ²                          (δ², τ²: SPE and T² limits)
//
// Missing channels. A frame is scored on its observed channels: the missing
// standardized values are replaced by their conditional expectation given
// the observed ones under the model's correlation A (regularised A + εI),
//
//	ẑ_m = A_mo A_oo⁻¹ z_o = −(Ω_mm)⁻¹ Ω_mo z_o,   Ω = (A + εI)⁻¹,
//
// and the limits are those of the reduced problem: the imputed frame has
// covariance S' = A − K (K = A_{m|o}, the conditional covariance, on the
// missing block), so T² uses (PᵀS'P)⁺ (χ² on its rank), SPE the traces of
// C̃S'C̃, and the φ and RBC limits follow from S'. Cost: at the first
// incomplete frame after a refresh A + εI is factored, A + εI = UᵀU
// (blocked Cholesky in place, O(p³/6) multiply-adds: p = 500 about 21·10⁶,
// most of them in an AVX2/FMA outer-product kernel; about 1.7 ms); each
// new missing pattern m then costs O(|m|·p²) for the rows of Ω (two
// triangular solves per missing channel; Ω itself is never formed),
// O(|m|²·p + |m|³) for H and K, and O(p r²) for its limits, and is cached
// (at most PatternCache patterns, round-robin, cleared at each refresh); a
// frame with a cached pattern costs O(|m|·p + p·r). Storage: PatternCache
// slots preallocated in New for up to 16 missing channels each (H 16·p,
// K 16² values); the p × p factor buffer is allocated at the first
// incomplete frame in the tracker's life (p² + 16p values). After that
// nothing allocates, also for a new pattern, unless a pattern has more than
// 16 missing channels, which grows its slot once. A missing channel's
// mean, variance and covariances are not updated by the frame; the frame
// joins the batched covariance update like a complete one (see EW).
//
// Stuck channels. A channel that repeats exactly the same value for
// FlatFrames frames, or whose EW standard deviation falls to StuckRel·|mean|,
// is reported in Score.Excluded and scored as missing; at the next refresh
// it leaves the model (zero row and column of A) until it moves again.
//
// The package is pure computation: no I/O, logging or goroutines. A Tracker
// is not safe for concurrent use.
package tracker

import (
	"errors"
	"fmt"
	"math"
	"reflect"
	"slices"
	"time"

	"modewatch/tracker/limits"
	"modewatch/tracker/modes"
)

// T2Form selects the T² control limit.
type T2Form int

const (
	// T2F is the Phase II F form for a new observation with the mean and
	// covariance estimated from n_eff earlier ones (NIST/SEMATECH e-Handbook
	// 6.5.4.3.4), n_eff the Kish effective sample size:
	//  τ² = r(n²−1)/(n(n−r)) · F_{1−α}(r, n−r)
	T2F T2Form = iota
	// T2ChiSquare is the large-sample form τ² = χ²_{1−α}(r), exact when
	// the covariance is known; within 1 % of the F form once n_eff is a
	// few hundred to a thousand (computed from the F and χ² quantiles:
	// m ≥ 719 for p = 6 at α = 0.005), and the F form is conservative below
	// that.
	T2ChiSquare
	// T2PhaseI is the Phase I (retrospective) form for frames that took
	// part in the estimate, e.g. screening a Fit reference set for outliers
	// with Evaluate: the beta distribution of Tracy, Young & Mason (1992),
	// one-sided at α, with m = n_eff:
	//  τ² = ((m−1)²/m) · B_{1−α}(r/2, (m−r−1)/2)
	// It is below the Phase II limit and never above (m−1)²/m, the largest
	// T² a reference frame can take. Not for new frames.
	T2PhaseI
)

// SPEForm selects the SPE control limit: [SPEBox] (the default) or
// [SPEJacksonMudholkar]. Both approximate the (1 − α) quantile of
// Q = Σ λⱼzⱼ² over the residual roots λⱼ.
//
// Box's limit is exact when the roots are equal and stays close while they
// are spread without a dominant one, the usual case of a unit with many
// channels and a residual made of sensor noise. When one or two residual
// roots dominate (too few modes for the structure, or a few channels much
// noisier than the rest) Box runs high and Jackson–Mudholkar is closer; JM
// is also conservative at small α where Box is liberal. Keep Box (cheap,
// O(p²r) per refresh) unless the false-alarm rate matters more than the
// cost of θ₃ (O(p³) per refresh) or the residual spectrum is known to be
// dominated by a few roots; a useful sign is Box's h = θ₁²/θ₂ well below
// the number of residual dimensions. An empirical limit ([Tracker.Calibrate])
// over a long normal reference log avoids the question. Measured rates are
// in the package README.
type SPEForm int

const (
	// SPEBox is Box's (1954) approximation g·χ²_{1−α}(h), g = θ₂/θ₁,
	// h = θ₁²/θ₂, with θᵢ = tr(Rⁱ) from traces (no eigendecomposition).
	SPEBox SPEForm = iota
	// SPEJacksonMudholkar is the limit of Jackson & Mudholkar (1979). It
	// needs θ₃ = tr(R³), formed explicitly: O(p³) per refresh.
	SPEJacksonMudholkar
)

// Index selects the index whose reconstruction-based contributions rank
// the channels.
type Index int

const (
	// IndexCombined ranks by the RBC of φ, which sees faults inside and
	// outside the mode subspace (Alcalá & Qin 2009, §4). It is the better
	// choice when many modes leave a small residual space: on 50-channel
	// models with 30 modes where plain SPE contributions put a 3σ sensor
	// bias first in 56–57 % of trials, RBC(φ) does in 96–97 % and RBC(SPE)
	// in 72–74 % (TestRBCSingleSensorBias).
	IndexCombined Index = iota
	// IndexSPE ranks by the RBC of SPE; as good as φ when the residual
	// space is large (few modes), and blind to faults inside the modes.
	IndexSPE
)

// State is the learning state reported with every score.
type State int

const (
	StateWarmUp   State = iota // collecting frames; no scores yet
	StateAdapting              // scoring and learning
	StateFrozen                // scoring; learning paused (Freeze)
	StateBaseline              // scoring against a fitted baseline held fixed (Fit)
)

var stateNames = [...]string{StateWarmUp: "warmup", StateAdapting: "adapting", StateFrozen: "frozen", StateBaseline: "baseline"}

// String is the state's name as views and records show it ("adapting"),
// or "State(n)" for a value outside the constants.
func (s State) String() string {
	if s >= 0 && int(s) < len(stateNames) {
		return stateNames[s]
	}
	return fmt.Sprintf("State(%d)", int(s))
}

// Defaults of Config.
const (
	DefaultAlpha        = 0.01
	DefaultRefreshEvery = 64
	DefaultBatch        = 64
	DefaultStuckRel     = 1e-9
	DefaultFlatFrames   = 60
	DefaultTopContrib   = 10
	DefaultRidge        = 1e-6
	DefaultPatternCache = 16
	// DefaultWarmUp is the number of frames learned before the first
	// model and score when Config.WarmUp is zero, and the service's
	// default (model.warmup). A unit of more than DefaultWarmUp/2 channels
	// wants a longer warm-up: at least two frames per channel (common
	// practice; a covariance from fewer frames than channels is singular).
	DefaultWarmUp = 500
)

// Config configures a Tracker. The zero value (with Period and HalfLife
// set) is usable: α = 0.01, refresh every 64 frames, Box SPE limit, F-form
// T² limit, RBC of φ.
type Config struct {
	// Period is the frame period and HalfLife the time after which a
	// frame's weight has halved: μ = 2^(−Period/HalfLife). HalfLife 0 means
	// no forgetting (equal weights).
	Period, HalfLife time.Duration
	// Modes configures the sparse modes (package modes).
	Modes modes.Config
	// Alpha is the false-alarm probability of every limit (default 0.01).
	Alpha float64
	// RefreshEvery is the number of learned frames between refreshes of the
	// modes and limits (default 64).
	RefreshEvery int
	// WarmUp is the number of frames learned before the first model and
	// score (default [DefaultWarmUp]).
	WarmUp int
	// Batch is the number of complete frames folded into the covariance by
	// one rank-B update (default 64).
	Batch int
	// T2Limit and SPELimit select the theoretical limits (see T2Form and
	// SPEForm for which to choose when). Defaults: the F form and Box.
	T2Limit  T2Form
	SPELimit SPEForm
	// RBCIndex selects the index of the reconstruction-based contributions.
	RBCIndex Index
	// StuckRel: a channel whose EW standard deviation falls to
	// StuckRel·|mean| or below (or to 0) is stuck (default 1e-9).
	StuckRel float64
	// FlatFrames: a channel repeating exactly the same value for this many
	// consecutive frames is flat-lined (default 60; negative disables).
	FlatFrames int
	// TopContrib is the number of ranked contributors reported (default 10).
	TopContrib int
	// Ridge ε regularises the correlation, A + εI, when conditioning missing
	// channels on observed ones (default 1e-6); masked channels are
	// conditioned for learning under it too, unless LearnRidge takes the
	// residual statistic's ε_R instead.
	Ridge float64
	// PatternCache bounds the number of missing-channel patterns whose
	// reduced models are cached between refreshes (default 16); each slot
	// is preallocated in New (about 16·p + 3·p values).
	PatternCache int
	// Lag is the horizon of N-step-ahead scoring (Wang, Kruger & Irwin
	// 2005): a frame is learned Lag frames after it was scored, so the
	// model that scores frame t has learned frames up to t − Lag − 1 and a
	// slow drift is scored against a model that has not yet followed it.
	// Default 0 (learn each frame after scoring it).
	Lag int
	// Robust is the Huber constant k of the bounded-influence learning
	// weight (see StepMasked): a frame whose distance d = √(φ/φ_lim) of
	// the channels it is learned on exceeds k is learned with weight k/d.
	// Default DefaultRobust; negative: every frame has weight 1.
	Robust float64
	// Residual adds the residual Mahalanobis statistic R = zᵀΩz − T²
	// (Score.Residual) and Variance the per-channel variance statistic
	// (Score.Variance); see resStat. Either costs 2p² values of storage,
	// a factorization per refresh and O(p²) per frame.
	Residual, Variance bool
	// ResidualRidge ε_R of Ω = (A + ε_R·I)⁻¹ (default DefaultResidualRidge)
	// and VarianceLambda the EWMA weight of the variance statistic
	// (default DefaultVarianceLambda, in (0, 1]).
	ResidualRidge, VarianceLambda float64
	// LearnRidge selects the ridge under which StepMasked reconstructs
	// masked channels for learning (default LearnRidgeResidual: ε_R, from
	// the residual statistic's factor, when Residual or Variance is on).
	LearnRidge LearnRidgeRule
	// RankResidual ranks Score.Contrib by the RBC of the residual
	// Mahalanobis statistic (with its limit χ²_{1−α}(1)) in frames where
	// that statistic is further over its limit than the RBC index
	// (needs Residual).
	RankResidual bool
	// Relations is the number of relation modes (sparse minor components
	// naming tight relations; see relStat), 0 for none, and RelationSize
	// the channels per relation (default DefaultRelationSize).
	Relations, RelationSize int
	// Mewma adds the MEWMA statistic of the residual part (Score.Mewma;
	// see mewma), for small persistent shifts of a relation, and
	// MewmaLambda is its EWMA weight λ in (0, 1] (default
	// DefaultMewmaLambda). It shares the factor of the residual statistic
	// (2p² values, a factorization per refresh) and costs one more
	// triangular solve, p²/2 multiply-adds, per frame.
	Mewma       bool
	MewmaLambda float64
	// Persist is the constant k of the persistence weight of learning (see
	// persist), in conditional standard deviations: a frame is learned
	// with weight min(1, (k/D)²) where D is the largest deviation of a
	// channel from its relation to the others in the smoothed frames
	// learned, so a slow departure from a tight relation that stays under
	// the per-frame limits is not absorbed within hours. Default
	// DefaultPersist; negative: off (weight 1). Needs Residual, Variance,
	// Mewma or Creep (the factor of Ω; without any, every weight is 1);
	// costs p²/2 to p² multiply-adds per learned frame and p values of
	// state. PersistLambda is the EWMA
	// weight λ of the smoothed frames, in (0, 1] (default
	// DefaultPersistLambda).
	Persist, PersistLambda float64
	// PersistLevelsOnly learns the normal levels of the persistence
	// weight's smoothed deviations but weighs every frame 1 (fitting on a
	// log that is normal by the user's word).
	PersistLevelsOnly bool
	// Creep adds the creep statistic (Score.Creep; see creep): each
	// channel's standardized reconstruction residual, smoothed by an EWMA
	// of weight CreepLambda in (0, 1] (default DefaultCreepLambda) and
	// normalised by its own observed normal variance; the largest term.
	// It shares the factor of the residual statistic and costs two
	// triangular solves, p² multiply-adds, per evaluation (every frame up
	// to 128 channels; see creepEvery).
	Creep       bool
	CreepLambda float64
	// LevelStep, when positive, keeps each channel's level step against
	// its relation to the others over two adjacent windows of LevelStep
	// frames (LevelStepsTo; see levelStep), at most MaxLevelStepFrames.
	// It shares the factor of the residual statistic and keeps 2·LevelStep
	// frames.
	LevelStep int
}

// Errors.
var (
	ErrConfig = errors.New("tracker: bad configuration")
	ErrWidth  = errors.New("tracker: frame width differs from the channel count")
	ErrInput  = errors.New("tracker: bad input")
	ErrModel  = errors.New("tracker: model refresh failed")
)

// Contribution is one channel's share in a frame's out-of-control score.
//
// Score.Contrib is ranked by RBC, not by RBC/RBCLimit: for a pure
// single-sensor fault the faulty channel has the largest RBC whatever the
// noise levels (Cauchy–Schwarz; Alcalá & Qin 2009), a guarantee the ratio
// lacks (TestRBCRatioLacksGuarantee shows a noise-free bias that the ratio
// pins on another channel); the ratio, whose in-control distribution is
// χ²₁/χ²_{1−α}(1) for every channel, is at hand from the two fields.
// Measured on seeded 3σ biases the two rankings differ by under one point
// either way.
type Contribution struct {
	Channel int
	// RBC is the reconstruction-based contribution of the channel to the
	// index chosen by Config.RBCIndex (φ by default), RBCLimit its own
	// control limit gᵢ·χ²_{1−α}(1) (Alcalá & Qin 2009).
	RBC, RBCLimit float64
	// Share is RBC over the index value: the fraction of the index removed
	// by reconstructing this channel alone (0..1).
	Share float64
	// SPEContrib is eᵢ², the channel's term of SPE (≥ 0; smears onto
	// correlated channels: Westerhuis, Gurden & Smilde 2000). T2Contrib is zᵢ(Dz)ᵢ,
	// D = P(PᵀAP)⁻¹Pᵀ, its term of T² (the terms sum to T²). T2Contrib is
	// signed: negative when the channel's standardized value zᵢ and the
	// model's pull (Dz)ᵢ point in opposite directions, i.e. the channel
	// moves against what the other channels' mode scores imply; such a
	// channel lowers T² and is not a cause of a high T².
	SPEContrib, T2Contrib float64
	// Modes lists the IDs of the modes whose support holds the channel.
	Modes []int
	// Reading is the channel's value in this frame, Expected the value the
	// other channels imply under the model (its reconstruction) and Band
	// the half-width of the interval Expected ± Band that holds the
	// fault-free value with probability BandCoverage; all in channel
	// units (NaN where the channel cannot be reconstructed). See
	// expectedOf for the formulas.
	Reading, Expected, Band float64
}

// Score is the result of one frame. Its slices are reused by the next Step
// with the same dst.
type Score struct {
	Ready         bool // false during warm-up: no statistics yet
	State         State
	T2, T2Limit   float64
	SPE, SPELimit float64
	Phi, PhiLimit float64
	Contrib       []Contribution // ranked by RBC, largest first (at most TopContrib)
	Missing       []int          // channels missing (or non-finite) in this frame
	Excluded      []int          // stuck or flat-lined channels, out of the model
	Warming       []int          // channels added by Grow, not in the model until they have WarmUp frames
	Frozen        bool           // learning paused
	NEff          float64        // Kish effective sample size of the model
	Modes         int            // number of modes r
	Calibrated    bool           // T², SPE, φ limits set empirically (Calibrate)
	LearnWeight   float64        // weight the frame was learned with (0: not learned; see StepMasked)
	// Residual is the residual Mahalanobis statistic and ResidualLimit its
	// limit; Variance the variance statistic, VarianceLimit its limit and
	// VarianceChannel the channel that sets it (−1: none). Zero unless
	// Config.Residual or Config.Variance (see resStat).
	Residual, ResidualLimit float64
	Variance, VarianceLimit float64
	VarianceChannel         int
	// Relation is the largest relation-mode score, RelationLimit its limit
	// and RelationMode the index of that relation in Tracker.Relations
	// (−1: none). Zero unless Config.Relations > 0 (see relStat).
	Relation, RelationLimit float64
	RelationMode            int
	// Mewma is the MEWMA statistic of the residual part and MewmaLimit
	// its limit (χ²_{1−α} on the residual dimensions; see mewma). Zero
	// unless Config.Mewma.
	Mewma, MewmaLimit float64
	// Creep is the creep statistic (the largest of the channels' smoothed
	// residuals squared over their normal variance),
	// CreepLimit its limit and CreepChannel the channel of the largest
	// term (−1: none). Zero unless Config.Creep (see creep).
	Creep, CreepLimit float64
	CreepChannel      int
	Frame             uint64 // frames seen, this one included
	NextRefresh       int    // learned frames until the next refresh (or the end of warm-up)
}

// Tracker is the streaming model of one plant unit.
type Tracker struct {
	p    int
	p0   int    // channels at New (or at Fit); channels from p0 on were added by Grow
	cfg  Config // with defaults for p
	ucfg Config // as given to New (defaults are recomputed by Grow)

	ew   *EW
	ms   *modes.Set
	mdl  *model
	w    *work
	lw   *learnWork // scratch of the learning pass (learn.go)
	lag  *lagRing   // frames waiting to be learned (Config.Lag; lag.go), nil without
	ls   limitSpec
	maxR int
	rs   *resStat   // nil unless Config.Residual or Config.Variance
	rl   *relStat   // nil unless Config.Relations > 0
	mw   *mewma     // nil unless Config.Mewma
	ps   *persist   // nil unless Config.Persist > 0 (persist.go)
	cr   *creep     // nil unless Config.Creep
	lst  *levelStep // nil unless Config.LevelStep
	// stepping: score is called from Step (advance the variance EWMA)
	stepping bool

	ready    bool // a model exists
	frozen   bool
	baseline bool
	frames   uint64
	learned  uint64
	since    int // learned frames since the last refresh

	obs   []bool
	last  []float64
	run   []int
	stuck []bool
	top   []int

	cal      bool
	calT2    float64
	calSPE   float64
	calPhi   float64
	calScale [3]float64 // empirical / theoretical at the base pattern

	floor []float64 // variance floor per channel (SetScaleFloor), nil: none

	next refreshNext // what a Refresh forms before it succeeds (refresh.go)
	shr  *shrinker   // correlation shrinkage (SetSerialFactors; shrink.go), nil: none
}

func (c *Config) defaults(p int) error {
	if c.Period < 0 || c.HalfLife < 0 {
		return fmt.Errorf("%w: Period and HalfLife must not be negative", ErrConfig)
	}
	if c.HalfLife > 0 && c.Period == 0 {
		return fmt.Errorf("%w: HalfLife needs Period", ErrConfig)
	}
	if c.Alpha == 0 {
		c.Alpha = DefaultAlpha
	}
	if !(c.Alpha > 0 && c.Alpha < 1) {
		return fmt.Errorf("%w: Alpha = %v not in (0, 1)", ErrConfig, c.Alpha)
	}
	if c.RefreshEvery == 0 {
		c.RefreshEvery = DefaultRefreshEvery
	}
	if c.Batch == 0 {
		c.Batch = DefaultBatch
	}
	if c.WarmUp == 0 {
		c.WarmUp = DefaultWarmUp
	}
	if c.StuckRel == 0 {
		c.StuckRel = DefaultStuckRel
	}
	if c.FlatFrames == 0 {
		c.FlatFrames = DefaultFlatFrames
	}
	if c.TopContrib == 0 {
		c.TopContrib = DefaultTopContrib
	}
	if c.Ridge == 0 {
		c.Ridge = DefaultRidge
	}
	if c.PatternCache == 0 {
		c.PatternCache = DefaultPatternCache
	}
	if c.Robust == 0 {
		c.Robust = DefaultRobust
	}
	if c.Persist == 0 {
		c.Persist = DefaultPersist
	}
	if c.PersistLambda == 0 {
		c.PersistLambda = DefaultPersistLambda
	}
	if !(c.PersistLambda > 0 && c.PersistLambda <= 1) || math.IsNaN(c.Persist) || math.IsInf(c.Persist, 0) {
		return fmt.Errorf("%w: Persist %v, PersistLambda %v not in (0, 1]", ErrConfig, c.Persist, c.PersistLambda)
	}
	if c.ResidualRidge == 0 {
		c.ResidualRidge = DefaultResidualRidge
	}
	if c.VarianceLambda == 0 {
		c.VarianceLambda = DefaultVarianceLambda
	}
	if c.RelationSize == 0 {
		c.RelationSize = DefaultRelationSize
	}
	if c.MewmaLambda == 0 {
		c.MewmaLambda = DefaultMewmaLambda
	}
	if !(c.MewmaLambda > 0 && c.MewmaLambda <= 1) {
		return fmt.Errorf("%w: MewmaLambda %v not in (0, 1]", ErrConfig, c.MewmaLambda)
	}
	if c.CreepLambda == 0 {
		c.CreepLambda = DefaultCreepLambda
	}
	if !(c.CreepLambda > 0 && c.CreepLambda <= 1) {
		return fmt.Errorf("%w: CreepLambda %v not in (0, 1]", ErrConfig, c.CreepLambda)
	}
	if c.LevelStep < 0 || c.LevelStep > MaxLevelStepFrames {
		return fmt.Errorf("%w: LevelStep %d not in [0, %d]", ErrConfig, c.LevelStep, MaxLevelStepFrames)
	}
	if c.Relations < 0 || c.Relations > 64 || c.RelationSize < 2 {
		return fmt.Errorf("%w: Relations %d (0 to 64), RelationSize %d (≥ 2)", ErrConfig, c.Relations, c.RelationSize)
	}
	if !(c.ResidualRidge > 0) || math.IsInf(c.ResidualRidge, 0) || !(c.VarianceLambda > 0 && c.VarianceLambda <= 1) {
		return fmt.Errorf("%w: ResidualRidge %v, VarianceLambda %v", ErrConfig, c.ResidualRidge, c.VarianceLambda)
	}
	switch {
	case c.Lag < 0 || c.Lag > MaxLag:
		return fmt.Errorf("%w: Lag %d outside 0…%d frames", ErrConfig, c.Lag, MaxLag)
	case c.LearnRidge != LearnRidgeResidual && c.LearnRidge != LearnRidgeMissing:
		return fmt.Errorf("%w: LearnRidge %d", ErrConfig, c.LearnRidge)
	case c.RefreshEvery < 0, c.Batch < 0, c.WarmUp < 2, c.StuckRel < 0, c.TopContrib < 0, c.Ridge < 0, c.PatternCache < 0:
		return fmt.Errorf("%w: RefreshEvery %d, Batch %d, WarmUp %d, StuckRel %v, TopContrib %d, Ridge %v, PatternCache %d",
			ErrConfig, c.RefreshEvery, c.Batch, c.WarmUp, c.StuckRel, c.TopContrib, c.Ridge, c.PatternCache)
	}
	if c.T2Limit != T2F && c.T2Limit != T2ChiSquare && c.T2Limit != T2PhaseI {
		return fmt.Errorf("%w: unknown T² limit %d", ErrConfig, c.T2Limit)
	}
	if c.SPELimit != SPEBox && c.SPELimit != SPEJacksonMudholkar {
		return fmt.Errorf("%w: unknown SPE limit %d", ErrConfig, c.SPELimit)
	}
	if c.RBCIndex != IndexCombined && c.RBCIndex != IndexSPE {
		return fmt.Errorf("%w: unknown RBC index %d", ErrConfig, c.RBCIndex)
	}
	return nil
}

// New returns a tracker for p channels. All per-frame storage is allocated
// here; Step allocates nothing once the first frames have sized dst.
func New(p int, cfg Config) (*Tracker, error) {
	if p < 1 {
		return nil, fmt.Errorf("%w: %d channels", ErrConfig, p)
	}
	ucfg := cfg
	if err := cfg.defaults(p); err != nil {
		return nil, err
	}
	ms, err := modes.NewSet(p, cfg.Modes)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrConfig, err)
	}
	mc := ms.Config()
	maxR := max(mc.Count, mc.MaxCount, 1)
	if maxR > 64 {
		return nil, fmt.Errorf("%w: at most 64 modes, got %d", ErrConfig, maxR)
	}
	t := &Tracker{
		p: p, p0: p, cfg: cfg, ucfg: ucfg, ms: ms, maxR: maxR,
		ew:    NewEW(p, Forgetting(cfg.Period, cfg.HalfLife), cfg.Batch, true),
		mdl:   newModel(p, maxR, cfg.PatternCache),
		w:     newWork(p, maxR),
		lw:    newLearnWork(p, maxR),
		lag:   newLagRing(p, cfg.Lag),
		obs:   make([]bool, p),
		last:  make([]float64, p),
		run:   make([]int, p),
		stuck: make([]bool, p),
		top:   make([]int, 0, cfg.TopContrib+1),
		rs:    newResStat(p, &cfg),
		mw:    newMewma(p, maxR, &cfg),
		ps:    newPersist(p, &cfg),
	}
	t.cr = newCreep(p, maxR, t.ew.mu, &cfg)
	t.lst = newLevelStep(p, &cfg)
	if t.rl, err = newRelStat(p, &cfg); err != nil {
		return nil, err
	}
	for i := range t.last {
		t.last[i] = math.NaN()
	}
	t.ls = limitSpec{alpha: cfg.Alpha, t2: cfg.T2Limit, spe: cfg.SPELimit, rbc: cfg.RBCIndex,
		chi1: limits.ChiSquare(1-cfg.Alpha, 1)}
	if cfg.SPELimit == SPEJacksonMudholkar {
		t.ls.jmSpace = newJMScratch(p, maxR)
	}
	return t, nil
}

// P returns the number of channels.
func (t *Tracker) P() int { return t.p }

// Config returns the configuration with defaults filled in.
func (t *Tracker) Config() Config { return t.cfg }

// Stats returns the EW statistics (read-only use).
func (t *Tracker) Stats() *EW { return t.ew }

// Modes returns the unit's mode set (read-only use).
func (t *Tracker) Modes() *modes.Set { return t.ms }

// State returns the learning state.
func (t *Tracker) State() State {
	switch {
	case !t.ready:
		return StateWarmUp
	case t.baseline:
		return StateBaseline
	case t.frozen:
		return StateFrozen
	}
	return StateAdapting
}

// Freeze pauses learning: frames are scored but do not update the
// statistics, and the model is not refreshed (recursive PCA practice while
// a fault is active: Li, Yue, Valle-Cervantes & Qin 2000).
func (t *Tracker) Freeze() { t.frozen = true }

// Thaw resumes learning after Freeze, and releases a fitted baseline (Fit)
// so that it adapts from then on.
func (t *Tracker) Thaw() { t.frozen, t.baseline = false, false }

// Frozen reports whether learning is paused.
func (t *Tracker) Frozen() bool { return t.frozen || t.baseline }

// Step scores one frame against the current model and then, unless learning
// is frozen, folds it into the statistics (and refreshes the model when
// due). x holds one value per channel in channel units; missing (nil or len
// p) marks channels without a valid value; a non-finite value is treated
// as missing. dst receives the score (Ready false during warm-up).
//
// Step returns ErrWidth if the frame does not have p channels, and an error
// wrapping ErrModel if a refresh failed (the previous model is kept; dst is
// valid).
func (t *Tracker) Step(dst *Score, x []float64, missing []bool) error {
	return t.StepMasked(dst, x, missing, nil)
}

// learnStep folds the frame xl (prepared by learnFrame) with weight wt
// into the statistics and refreshes the model when due.
func (t *Tracker) learnStep(xl []float64, wt float64) error {
	t.ew.UpdateWeighted(xl, t.obs, wt)
	t.learned++
	t.since++
	if (!t.ready && t.learned >= uint64(t.cfg.WarmUp)) || (t.ready && t.cfg.RefreshEvery > 0 && t.since >= t.cfg.RefreshEvery) {
		if err := t.Refresh(); err != nil {
			t.since = 0 // keep the previous model; retry after RefreshEvery frames
			return err
		}
	}
	return nil
}

// Evaluate scores one frame like Step but changes no state: it learns
// nothing and does not advance the flat-line counters or the frame count.
func (t *Tracker) Evaluate(dst *Score, x []float64, missing []bool) error {
	if err := t.prepare(x, missing, false); err != nil {
		return err
	}
	return t.score(dst, x)
}

// prepare validates the frame, fills t.obs and t.stuck and, with track,
// advances the flat-line counters.
func (t *Tracker) prepare(x []float64, missing []bool, track bool) error {
	if len(x) != t.p || (missing != nil && len(missing) != t.p) {
		return fmt.Errorf("%w: %d values, %d missing flags, tracker has %d channels", ErrWidth, len(x), len(missing), t.p)
	}
	for i, v := range x {
		ok := (missing == nil || !missing[i]) && !math.IsNaN(v) && !math.IsInf(v, 0)
		t.obs[i] = ok
		if !ok || !track {
			continue
		}
		if v == t.last[i] {
			t.run[i]++
		} else {
			t.run[i] = 1
			t.last[i] = v
		}
	}
	e := t.ew
	ff, rel := t.cfg.FlatFrames, t.cfg.StuckRel
	for i := range x {
		// = t.isStuck(i), unrolled for the per-frame path
		st := ff > 0 && t.run[i] >= ff
		if !st && e.count[i] >= 2 {
			v := e.vari[i]
			s := rel * math.Abs(e.mean[i])
			st = v <= s*s || v == 0
		}
		t.stuck[i] = st
	}
	return nil
}

// isStuck: flat-lined for FlatFrames frames, or EW variance collapsed.
func (t *Tracker) isStuck(i int) bool {
	if t.cfg.FlatFrames > 0 && t.run[i] >= t.cfg.FlatFrames {
		return true
	}
	if t.ew.Count(i) < 2 {
		return false
	}
	v := t.ew.Var(i)
	s := t.cfg.StuckRel * math.Abs(t.ew.Mean(i))
	return v <= s*s || v == 0
}

// standardize fills w.z with the standardized frame x and w.miss with the
// channels scored as missing (not observed, stuck, without variance, or
// set in mask, which may be nil); z is 0 for those and for channels out of
// the model.
func (t *Tracker) standardize(w *work, x []float64, mask []bool) {
	t.standardizeFrom(w, x, mask, nil)
}

// standardizeFrom is standardize, with the values of the channels kept
// copied from from when it is not nil (the same frame standardized without
// a mask; maskScored) instead of computed from x.
func (t *Tracker) standardizeFrom(w *work, x []float64, mask []bool, from []float64) {
	m := t.mdl
	w.miss = w.miss[:0]
	for i := 0; i < t.p; i++ {
		switch {
		case !m.include[i]:
			w.z[i] = 0 // out of the model since the refresh: zero row of A
		case !t.obs[i] || t.stuck[i] || !(t.ew.Var(i) > 0) || (mask != nil && mask[i]):
			w.z[i] = 0
			w.miss = append(w.miss, i)
		case from != nil:
			w.z[i] = from[i]
		default:
			w.z[i] = (x[i] - t.ew.Mean(i)) / math.Sqrt(t.scaleVar(i))
		}
	}
}

// score fills dst for x (t.obs and t.stuck set).
func (t *Tracker) score(dst *Score, x []float64) error {
	dst.Frame = t.frames
	dst.State = t.State()
	dst.Frozen = t.Frozen()
	dst.Calibrated = t.cal
	dst.Missing = dst.Missing[:0]
	dst.Excluded = dst.Excluded[:0]
	dst.Warming = dst.Warming[:0]
	dst.Contrib = dst.Contrib[:0]
	t.channelStates(dst)
	if t.cfg.RefreshEvery > 0 {
		dst.NextRefresh = t.cfg.RefreshEvery - t.since
	}
	if !t.ready {
		dst.Ready = false
		dst.T2, dst.T2Limit, dst.SPE, dst.SPELimit, dst.Phi, dst.PhiLimit = 0, 0, 0, 0, 0, 0
		dst.NEff, dst.Modes = 0, 0
		if t.cfg.RefreshEvery > 0 {
			dst.NextRefresh = t.cfg.WarmUp - int(t.learned)
		}
		return nil
	}
	m, w := t.mdl, t.w
	t.standardize(w, x, nil)
	pt, err := m.lookupPattern(w.miss, &t.ls, t.cfg.Ridge, t.cfg.PatternCache)
	if err != nil {
		dst.Ready = false
		return fmt.Errorf("%w: %w", ErrModel, err)
	}
	if len(w.miss) > 0 {
		m.impute(w.z, pt, w.imp)
	}
	t2, spe, phi := m.scoreZ(w, pt, t.cfg.RBCIndex)
	if t.rs != nil {
		t.rs.score(dst, m, w.z, w.dz, t2, len(w.miss), t.obs, t.stuck, t.stepping, t.stepping && !t.frozen && !t.baseline)
	}
	if t.rl != nil {
		t.rl.score(dst, w.z)
	}
	if t.mw != nil {
		t.mw.score(dst, m, t.rs, w.z, t.stepping)
	}
	if t.cr != nil {
		t.cr.score(dst, m, t.rs, w.z, t.obs, t.stuck, t.frames, t.stepping, t.stepping && !t.frozen && !t.baseline)
	}
	if t.lst != nil {
		t.lst.score(t.rs, w.z, t.obs, t.stuck, m.include, t.frames, t.stepping)
	}
	dst.Ready = true
	dst.T2, dst.SPE, dst.Phi = t2, spe, phi
	dst.T2Limit, dst.SPELimit, dst.PhiLimit = pt.t2Lim, pt.speLim, pt.phiLim
	if t.cal {
		if pt == m.base {
			dst.T2Limit, dst.SPELimit, dst.PhiLimit = t.calT2, t.calSPE, t.calPhi
		} else {
			dst.T2Limit *= t.calScale[0]
			dst.SPELimit *= t.calScale[1]
			dst.PhiLimit *= t.calScale[2]
		}
	}
	dst.NEff = m.nEff
	dst.Modes = m.r
	// Rank the top contributors by RBC (insertion into a short list).
	index, indexLim := phi, dst.PhiLimit
	if t.cfg.RBCIndex == IndexSPE {
		index, indexLim = spe, dst.SPELimit
	}
	rbc, useRes := w.rbc, t.rankResidual(dst, index, indexLim)
	if useRes {
		rbc, index = t.rs.contributions(), dst.Residual
	}
	best := ratio(index, indexLim)
	if useRes {
		best = ratio(dst.Residual, dst.ResidualLimit)
	}
	useMw := t.rankMewma(dst, index, indexLim, useRes)
	if useMw {
		rbc, index, useRes = t.mw.contributions(m, t.rs), dst.Mewma, false
		best = dst.Mewma / (dst.MewmaLimit * t.mw.rel)
	}
	useCr := t.rankCreep(dst, best)
	if useCr {
		rbc, index, useRes, useMw = t.cr.term, dst.Creep, false, false
	}
	top := t.rankTop(rbc, pt.rbcInv)
	for _, i := range top {
		n := len(dst.Contrib)
		if n < cap(dst.Contrib) {
			dst.Contrib = dst.Contrib[:n+1]
		} else {
			dst.Contrib = append(dst.Contrib, Contribution{})
		}
		c := &dst.Contrib[n]
		c.Channel = i
		c.RBC = rbc[i]
		c.RBCLimit = pt.rbcLim[i]
		if useRes {
			c.RBCLimit = t.rs.rbcLim
		}
		if useMw {
			c.RBCLimit = t.rs.rbcLim * t.mw.rel
		}
		if useCr {
			c.RBCLimit = t.cr.lim * t.cr.rel
		}
		c.Share = 0
		if index > 0 {
			c.Share = rbc[i] / index
		}
		c.SPEContrib = w.spec[i]
		c.T2Contrib = w.t2c[i]
		c.Modes = append(c.Modes[:0], m.modeIDs[m.modeOff[i]:m.modeOff[i+1]]...)
		t.expectedOf(c, i, x, pt)
	}
	return nil
}

// channelStates lists in dst the channels of this frame that are missing,
// excluded (stuck, or left out of the model) and warming.
func (t *Tracker) channelStates(dst *Score) {
	for i := 0; i < t.p; i++ {
		switch {
		case !t.obs[i]:
			dst.Missing = append(dst.Missing, i)
		case t.stuck[i]:
			dst.Excluded = append(dst.Excluded, i)
		case t.warming(i):
			dst.Warming = append(dst.Warming, i)
		case t.ready && !t.mdl.include[i]:
			dst.Excluded = append(dst.Excluded, i)
		}
	}
}

// rankTop returns the TopContrib channels of largest rbc, largest first,
// among those the pattern can reconstruct (rbcInv ≠ 0), by insertion into
// a short list kept in t.top.
func (t *Tracker) rankTop(rbc, rbcInv []float64) []int {
	top := t.top[:0]
	k := t.cfg.TopContrib
	for i := 0; i < t.p; i++ {
		if rbcInv[i] == 0 {
			continue
		}
		v := rbc[i]
		if len(top) == k && (k == 0 || v <= rbc[top[k-1]]) {
			continue
		}
		j := len(top)
		if j < k {
			top = append(top, i)
		} else {
			j = k - 1
		}
		for j > 0 && rbc[top[j-1]] < v {
			top[j] = top[j-1]
			j--
		}
		top[j] = i
	}
	t.top = top
	return top
}

// ContributionsTo copies the per-channel RBC, SPE and T² contributions of
// the last scored frame into the non-nil destinations (len p each).
func (t *Tracker) ContributionsTo(rbc, spe, t2 []float64) {
	if rbc != nil {
		copy(rbc, t.w.rbc)
	}
	if spe != nil {
		copy(spe, t.w.spec)
	}
	if t2 != nil {
		copy(t2, t.w.t2c)
	}
}

// Refresh forms the correlation matrix of the standardized channels from
// the EW covariance (stuck channels get zero rows and leave the model, and
// so do channels added by Grow until they have WarmUp frames),
// refreshes the modes from it (warm-started) and recomputes the limits.
// Step calls it every RefreshEvery learned frames. On error the previous
// model is kept whole: its correlation, its channels, its modes and its
// limits. It drops empirical limits set by Calibrate.
func (t *Tracker) Refresh() error {
	m := t.mdl
	// The candidate correlation and channels are formed beside the model's
	// and swapped in only once the modes are found.
	nx := t.next.sized(t.p)
	nEff := math.Inf(1)
	any := false
	for i := 0; i < t.p; i++ {
		in := t.ew.Count(i) >= 2 && t.ew.Var(i) > 0 && !t.isStuck(i) &&
			(i < t.p0 || t.ew.Count(i) >= float64(t.cfg.WarmUp))
		nx.include[i] = in
		if in {
			any = true
			nEff = math.Min(nEff, t.ew.NEff(i))
		}
	}
	if !any {
		return fmt.Errorf("%w: no channel has variance", ErrModel)
	}
	t.corrTo(nx.a, nx.include)
	t.shrink(nx.a, nx.include)
	if err := t.ms.Refresh(nx.a); err != nil {
		return fmt.Errorf("%w: %w", ErrModel, err)
	}
	if t.ms.Count() == 0 {
		t.ms.Revert()
		return fmt.Errorf("%w: the correlation matrix gave no modes", ErrModel)
	}
	m.a, nx.a = nx.a, m.a
	m.include, nx.include = nx.include, m.include
	t.install(nEff)
	return nil
}

// install builds the model from m.a and the mode set's loadings.
func (t *Tracker) install(nEff float64) {
	m := t.mdl
	m.nEff = nEff
	t.ls.nEff = nEff
	r := t.ms.Count()
	m.setLoadings(t.ms.Loadings())
	// Mode membership per channel.
	m.modeIDs = m.modeIDs[:0]
	for i := 0; i <= t.p; i++ {
		m.modeOff[i] = 0
	}
	for j := 0; j < r; j++ {
		for _, i := range t.ms.Mode(j).Support {
			m.modeOff[i+1]++
		}
	}
	for i := 0; i < t.p; i++ {
		m.modeOff[i+1] += m.modeOff[i]
	}
	need := m.modeOff[t.p]
	if cap(m.modeIDs) < need {
		m.modeIDs = make([]int, need, t.p*t.maxR)
	}
	m.modeIDs = m.modeIDs[:need]
	for i := 0; i < t.p; i++ {
		n := 0
		for j := 0; j < r; j++ {
			md := t.ms.Mode(j)
			if _, ok := slices.BinarySearch(md.Support, i); ok {
				m.modeIDs[m.modeOff[i]+n] = md.ID
				n++
			}
		}
	}
	m.computePattern(m.base, &t.ls)
	if t.rs != nil {
		t.rs.refresh(m, t.cfg.Alpha)
		if t.rs.ok && t.rs.ridge == t.cfg.Ridge {
			m.shareFactor(t.rs.factorU()) // one factorization for both
		}
	}
	if t.rl != nil {
		t.rl.refresh(m)
	}
	t.ready = true
	t.since = 0
	t.cal = false
}

// Fit sets a fixed baseline from a batch of frames (rows of frames, each of
// length p), weighting every frame equally: the mean, the sample standard
// deviation (n − 1) and the correlation of the standardized channels, then
// the modes and limits, with the effective sample size n. The tracker then
// scores against this baseline without learning until Thaw. Frames may not
// have missing or non-finite values; the error names the first such value.
// A Fit that fails, in its checks or in the refresh, leaves the tracker as
// it was: its statistics, model, flat runs and lag ring.
func (t *Tracker) Fit(frames [][]float64) error {
	n := len(frames)
	if n < 3 {
		return fmt.Errorf("%w: Fit needs at least 3 frames, got %d", ErrInput, n)
	}
	for k, f := range frames {
		if len(f) != t.p {
			return fmt.Errorf("%w: Fit frame %d has %d values, want %d", ErrWidth, k, len(f), t.p)
		}
		for i, v := range f {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: Fit frame %d, channel %d: value %v", ErrInput, k, i, v)
			}
		}
	}
	e := NewEW(t.p, t.ew.mu, t.cfg.Batch, true)
	// Equal weights: the cumulative start gives αₖ = 1/k while 1/k > 1 − μ;
	// set μ = 1 for the fit and restore it afterwards.
	e.mu = 1
	for _, f := range frames {
		e.Update(f, nil)
	}
	e.Flush()
	// Population → sample (n − 1) variance and covariance.
	s := float64(n) / float64(n-1)
	for i := range e.vari {
		e.vari[i] *= s
	}
	for i := range e.cov.Data {
		e.cov.Data[i] *= s
	}
	e.mu = t.ew.mu
	// Refresh reads the statistics and the channel count it may include;
	// a refresh that fails puts both back, so the tracker stays as it was.
	oldEW, oldP0 := t.ew, t.p0
	t.ew = e
	t.p0 = t.p // every channel is in every fit frame
	if err := t.Refresh(); err != nil {
		t.ew, t.p0 = oldEW, oldP0
		return err
	}
	t.lag.reset()
	for i := range t.run {
		t.run[i] = 0
		t.last[i] = math.NaN()
	}
	t.baseline = true
	t.learned = uint64(n)
	return nil
}

// Calibrate sets the T², SPE and φ limits empirically: each is the
// (1 − α) quantile of that statistic over the reference frames (normal
// operation), i.e. the k-th largest value with k = ⌊α·n⌋ + 1, as the
// published Tennessee Eastman tables do (Russell, Chiang & Braatz 2000).
// The frames are scored against the current model without learning. For a
// frame with missing channels the limit of its reduced problem is scaled by
// the same empirical/theoretical ratio. The empirical limits hold until the
// next refresh.
func (t *Tracker) Calibrate(frames [][]float64) error {
	if !t.ready {
		return fmt.Errorf("%w: Calibrate before the model exists", ErrInput)
	}
	n := len(frames)
	if n == 0 {
		return fmt.Errorf("%w: Calibrate needs frames", ErrInput)
	}
	vals := [3][]float64{make([]float64, n), make([]float64, n), make([]float64, n)}
	var sc Score
	saveCal := t.cal
	t.cal = false
	for k, f := range frames {
		if err := t.Evaluate(&sc, f, nil); err != nil {
			t.cal = saveCal
			return fmt.Errorf("tracker: Calibrate frame %d: %w", k, err)
		}
		vals[0][k], vals[1][k], vals[2][k] = sc.T2, sc.SPE, sc.Phi
	}
	scratch := make([]float64, n)
	var lim [3]float64
	for j := range vals {
		v, err := limits.Empirical(t.cfg.Alpha, vals[j], scratch)
		if err != nil {
			t.cal = saveCal
			return fmt.Errorf("tracker: Calibrate: %w", err)
		}
		lim[j] = v
	}
	b := t.mdl.base
	t.calT2, t.calSPE, t.calPhi = lim[0], lim[1], lim[2]
	t.calScale = [3]float64{lim[0] / b.t2Lim, lim[1] / b.speLim, lim[2] / b.phiLim}
	t.cal = true
	return nil
}

// warming reports whether channel i was added by Grow and has not yet
// entered the model: out of it, not stuck, and with fewer than WarmUp
// frames (plus the frames to the refresh that admits it).
func (t *Tracker) warming(i int) bool {
	if i < t.p0 || (t.ready && t.mdl.include[i]) {
		return false
	}
	n := float64(t.cfg.WarmUp)
	if t.ready {
		n += float64(t.cfg.RefreshEvery)
	}
	return t.ew.Count(i) < n
}

// Grow widens the tracker to p2 ≥ P() channels, for a unit whose channel
// registry grew (auto-discovery). cfg is the configuration for p2 channels,
// as it would be given to New(p2, cfg), so that a checkpoint of the grown
// tracker restores into New(p2, cfg); it must keep Period, HalfLife and
// Batch (the learned statistics depend on them), while the rest (modes,
// α, limit forms, warm-up, ...) takes effect at once. Defaults that depend
// on the width (the modes' MaxCount) are those of p2.
//
// Channels 0…P()−1 keep everything learned (means, variances,
// covariances, counts, flat-line state, learning state, empirical limits);
// channels P()…p2−1 start empty and are learned from the next frame on
// (their frames batch with the others'). They enter the model at the first
// refresh after they have WarmUp frames, and until then are listed in
// Score.Warming and scored as outside the model (like an excluded channel:
// no effect on T², SPE, φ or the limits).
//
// If a model exists it is rebuilt at once from the same correlation A
// (zero rows for the new channels) with a p2-wide mode set, started
// cold: for dense modes scores and limits are unchanged to the mode
// solver's tolerance (3·10⁻⁷ relative in TestGrow); sparse modes may
// converge differently, and the mode IDs restart. Nothing is learned by
// Grow itself, so a frozen tracker or a fitted baseline stays as it is.
// Empirical limits (Calibrate) are kept unless α changes. Cost: O(p2²)
// copies plus one mode refresh; it allocates (not a per-frame call). On
// error the tracker is unchanged. p2 < P() is an error wrapping
// ErrWidth; p2 == P() with the same cfg does nothing.
func (t *Tracker) Grow(p2 int, cfg Config) error {
	if p2 < t.p {
		return fmt.Errorf("%w: cannot shrink from %d to %d channels", ErrWidth, t.p, p2)
	}
	ucfg := cfg
	if err := cfg.defaults(p2); err != nil {
		return err
	}
	if cfg.Period != t.cfg.Period || cfg.HalfLife != t.cfg.HalfLife || cfg.Batch != t.cfg.Batch {
		return fmt.Errorf("%w: Grow cannot change Period, HalfLife or Batch (%v, %v, %d → %v, %v, %d)",
			ErrConfig, t.cfg.Period, t.cfg.HalfLife, t.cfg.Batch, cfg.Period, cfg.HalfLife, cfg.Batch)
	}
	if p2 == t.p && reflect.DeepEqual(ucfg, t.ucfg) {
		return nil
	}
	keepCal := t.cal && cfg.Alpha == t.cfg.Alpha
	ms, err := modes.NewSet(p2, cfg.Modes)
	if err != nil {
		return fmt.Errorf("%w: %w", ErrConfig, err)
	}
	mc := ms.Config()
	maxR := max(mc.Count, mc.MaxCount, 1)
	if maxR > 64 {
		return fmt.Errorf("%w: at most 64 modes, got %d", ErrConfig, maxR)
	}
	p := t.p
	m2 := newModel(p2, maxR, cfg.PatternCache)
	if t.ready {
		old := t.mdl.a.RawSymmetric()
		a2 := m2.a.RawSymmetric()
		for i := 0; i < p; i++ {
			copy(a2.Data[i*a2.Stride+i:i*a2.Stride+p], old.Data[i*old.Stride+i:i*old.Stride+p])
		}
		copy(m2.include, t.mdl.include)
		if err := ms.Refresh(m2.a); err != nil {
			return fmt.Errorf("%w: %w", ErrModel, err)
		}
		if ms.Count() == 0 {
			return fmt.Errorf("%w: the correlation matrix gave no modes", ErrModel)
		}
	}
	rl, err := newRelStat(p2, &cfg)
	if err != nil {
		return err
	}
	// Commit.
	t.ew = t.ew.grown(p2)
	grow := func(s []float64, fill float64) []float64 {
		out := make([]float64, p2)
		copy(out, s)
		for i := len(s); i < p2; i++ {
			out[i] = fill
		}
		return out
	}
	t.last = grow(t.last, math.NaN())
	run := make([]int, p2)
	copy(run, t.run)
	t.run = run
	t.obs = make([]bool, p2)
	t.stuck = make([]bool, p2)
	if t.floor != nil {
		t.floor = grow(t.floor, 0)
	}
	nEff := t.mdl.nEff
	t.p, t.cfg, t.ucfg, t.ms, t.maxR = p2, cfg, ucfg, ms, maxR
	t.mdl = m2
	t.w = newWork(p2, maxR)
	t.lw = newLearnWork(p2, maxR)
	t.lag = t.lag.grown(p2, cfg.Lag)
	t.rs = newResStat(p2, &cfg)
	t.rl = rl
	t.mw = t.mw.grown(p2, maxR, &cfg)
	t.ps = t.ps.grown(p2, &cfg)
	t.cr = t.cr.grown(p2, maxR, t.ew.mu, &cfg)
	t.lst = t.lst.grown(p2, &cfg)
	if cap(t.top) < cfg.TopContrib+1 {
		t.top = make([]int, 0, cfg.TopContrib+1)
	}
	t.ls = limitSpec{alpha: cfg.Alpha, t2: cfg.T2Limit, spe: cfg.SPELimit, rbc: cfg.RBCIndex,
		chi1: limits.ChiSquare(1-cfg.Alpha, 1)}
	if cfg.SPELimit == SPEJacksonMudholkar {
		t.ls.jmSpace = newJMScratch(p2, maxR)
	}
	if t.ready {
		since := t.since
		t.install(nEff)
		t.since, t.cal = since, keepCal
	}
	return nil
}
