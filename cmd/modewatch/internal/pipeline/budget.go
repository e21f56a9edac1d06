package pipeline

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker/limits"
)

// Calibration is a unit's false-alert budget calibration (alerts.budget),
// made by fit: every control limit of the unit is multiplied by Scale.
type Calibration struct {
	// Scale multiplies every limit of the unit (T², SPE, φ and the others
	// chosen by model.statistics).
	Scale float64 `json:"scale"`
	// Budget is the target, false alerts per day.
	Budget float64 `json:"budget_per_day"`
	// Rate is the expected false alerts per day at Scale, RateSE its
	// standard error and RateLow and RateHigh its approximate 95 %
	// interval: where the true rate lies, not how many alerts a few days
	// will count (Week, Predict). They come from the held-out alerts
	// themselves, anchored at the level of the (Observed+1)-th held-out
	// excursion and carried to Scale by the GEV's tail (stateRate); model
	// files written before it state GEVRate here, with the delta method's
	// interval.
	Rate     float64 `json:"rate_per_day"`
	RateSE   float64 `json:"rate_se_per_day"`
	RateLow  float64 `json:"rate_low_per_day"`
	RateHigh float64 `json:"rate_high_per_day"`
	// GEVRate is the extreme-value model's own rate at Scale, −ln(1 − P)
	// alerts per block for its block exceedance probability P: at the
	// GEV's scale it is about the budget, and from 20 block maxima it
	// understates the true rate (README, False-alert budget). Model files
	// written before it have none.
	GEVRate float64 `json:"gev_rate_per_day,omitempty"`
	// Week is the predictive interval of the number of false alerts over
	// PredictWeekDays of normal operation (Predict): the rate's
	// uncertainty and the chance of counting together. Model files
	// written before it have none.
	Week *Prediction `json:"predicted_week,omitempty"`
	// Observed is the number of alerts the whole alarm rule opened over
	// the held-out data at Scale; HeldOutDays the held-out exposure, the
	// frames times their period (model files written before it: the
	// span from the first to the last frame, one period less).
	Observed    int     `json:"observed_alerts"`
	HeldOutDays float64 `json:"held_out_days"`
	// Blocks of length Block gave the block maxima of the rule statistic
	// fitted by the GEV (Mu, Sigma, Xi).
	Blocks int             `json:"blocks"`
	Block  alerts.Duration `json:"block"`
	Mu     float64         `json:"gev_mu"`
	Sigma  float64         `json:"gev_sigma"`
	Xi     float64         `json:"gev_xi"`
	// SharedShape: Xi is the shape common to the units fitted together
	// (alerts.calibration_shape: shared, RatioRecorder.PoolShape), Mu and
	// Sigma the unit's own at that shape.
	SharedShape bool `json:"gev_shape_shared,omitempty"`
	// GEVScale, when set, is the GEV's scale for the budget, which opened
	// more alerts over the held-out data than the budget allows there
	// (heldOutAllowance); Scale was then raised to the smallest that
	// does not.
	GEVScale float64 `json:"gev_scale,omitempty"`
	// Scales, when set (alerts.budget_per_statistic), multiply each
	// statistic's limit by its own factor, keyed by statistic name (t2,
	// spe, phi, res, var, rel): every statistic at the same tail
	// probability, the whole rule at the budget (calibrateEach). Rate,
	// its interval and Observed then describe the rule at these scales;
	// Scale stays the single scale, used by a statistic without one.
	Scales map[string]float64 `json:"scales,omitempty"`
	// DaysNeeded is set when the normal log is too short for the budget:
	// the days of normal log (held-out and learning parts together) for
	// the interval to lie within a factor of two of the rate.
	DaysNeeded float64 `json:"days_needed,omitempty"`
}

// Calibration settings.
const (
	// CalibrationShare is the share of the normal log that fit learns
	// from before scoring the rest for the calibration.
	CalibrationShare = 0.5
	// minBlocks is the fewest block maxima the GEV is fitted to (Coles
	// 2001 fits 65; below about 20 the shape is barely identified).
	minBlocks = 20
	// heldOutBlocks is the number of blocks the held-out span is cut
	// into where minBlock and maxBlock allow (fewer on a short log, down
	// to minBlocks): the trade between maxima close to the GEV and
	// independent (long blocks) and a shape and scale fitted from more
	// of them (Coles 2001, §3.3.1). Chosen on the realism suite over
	// twenty seeds among 20, 30, 40 and 60 (README, Validation, One tail
	// shape for the plant's units).
	heldOutBlocks = 30
	// minBlock and maxBlock bound the block length: long enough that
	// blocks are nearly independent for the slow serial correlation of
	// process data, short enough to give minBlocks from a few days.
	minBlock = 30 * time.Minute
	maxBlock = 24 * time.Hour
	// maxBlockShare bounds P(block maximum > scale) at the budget, so that
	// a block rarely holds two alerts.
	maxBlockShare = 0.2
)

// ErrCalibration marks a calibration that could not be made.
var ErrCalibration = errors.New("pipeline: budget calibration")

// RatioRecorder records, per unit and frame, the ratio statistic/limit of
// each statistic that raises alarms (NaN when a statistic has no valid
// limit), for CalibrateBudget. Use OnScore as the replay's OnScore.
type RatioRecorder struct {
	units map[string]*ratioSeries
	// shape holds, per unit, its GEV with the shape common to the units
	// (PoolShape).
	shape map[string]limits.GEVFit
}

type ratioSeries struct {
	t []time.Time
	r [][nStatistics]float64
	// spread: no channel explains alerts.PointShare of the frame's index
	// (not alerts.Concentrated), for alerts.calibrate_points.
	spread []bool
}

// nStatistics is the number of statistics appendStats can report.
const nStatistics = 8

// NewRatioRecorder returns an empty recorder.
func NewRatioRecorder() *RatioRecorder { return &RatioRecorder{units: map[string]*ratioSeries{}} }

// OnScore records the unit's latest score at frame time t.
func (rr *RatioRecorder) OnScore(u *Unit, t time.Time) {
	s := &u.score
	if !s.Ready {
		return
	}
	ser := rr.units[u.Name]
	if ser == nil {
		ser = &ratioSeries{}
		rr.units[u.Name] = ser
	}
	var row [nStatistics]float64
	for i := range row {
		row[i] = math.NaN()
	}
	for _, x := range u.last {
		i := slices.Index(statNames[:], x.Name)
		if i >= 0 && x.Limit > 0 && !math.IsInf(x.Limit, 0) && !math.IsNaN(x.Value) {
			row[i] = x.Value / x.Limit
		}
	}
	ser.t = append(ser.t, t)
	ser.r = append(ser.r, row)
	ser.spread = append(ser.spread, !alerts.Concentrated(&u.p.obs))
}

// Units returns the names of the units recorded.
func (rr *RatioRecorder) Units() []string {
	var n []string
	for k := range rr.units {
		n = append(n, k)
	}
	slices.Sort(n)
	return n
}

// Calibrate calibrates unit name (see CalibrateBudget); with perStat
// (alerts.budget_per_statistic) each statistic also gets its own scale
// (calibrateEach); with points (alerts.calibrate_points, for a unit that
// runs the new-operating-point rule with accept_after accept) the
// excursions that rule records as notices are left out (pointRatios).
func (rr *RatioRecorder) Calibrate(name string, budget float64, rule alerts.AlarmRule, learnDays float64, perStat, points bool, accept time.Duration) (Calibration, error) {
	ser := rr.units[name]
	if ser == nil || len(ser.t) == 0 {
		return Calibration{}, fmt.Errorf("%w: unit %s: no scored frame in the held-out data", ErrCalibration, name)
	}
	r := ser.r
	if points {
		r = pointRatios(ser.t, ser.r, ser.spread, accept)
	}
	if !perStat && (hasStat(r, slotMewma) || hasStat(r, slotCreep)) {
		return calibrateSmoothed(ser.t, r, budget, rule, learnDays)
	}
	var shared *limits.GEVFit
	if f, ok := rr.shape[name]; ok && !perStat && !points {
		shared = &f
	}
	cal, err := calibrateBudgetFit(ser.t, r, budget, rule, learnDays, shared)
	if err == nil && shared != nil {
		cal.SharedShape = true
	}
	if err == nil && perStat {
		calibrateEach(&cal, ser.t, r, rule)
	}
	return cal, err
}

// AlarmRule returns the alarm rule of unit name under configuration c.
func AlarmRule(c *configs.Config, name string) alerts.AlarmRule {
	ac := AlertsConfig(c)
	r, ok := ac.Units[name]
	if !ok {
		r = ac.Rules
	}
	ar := alerts.AlarmRule{N: r.OnCount, M: r.OnWindow, OnHold: r.OnHold, OffDelay: max(r.OffDelay, 0), Deadband: r.Deadband}
	return ar
}

// CalibrateBudget finds the scale c of a unit's limits at which its whole
// alarm rule opens, on normal data, budget false alerts per day.
//
// Input: the frame times t and, per frame, the ratio statistic/limit of
// each alarm statistic (NaN: none) of held-out normal frames scored as the
// service would score them. The rule statistic of frame k is the largest,
// over statistics, of the N-th largest ratio among the last M frames: the
// on-delay rule (N of M frames over the limit) opens an alarm at scale c
// exactly when it exceeds c. It is serially correlated, so the frames are
// cut into blocks (30 of them where the span allows, at least 20; 30 min
// to 24 h, and at most a fifth of the budget's return period) whose
// maxima are close to
// independent; a GEV is fitted to the block maxima (Coles 2001, ch. 3 and
// §5.2 on stationary sequences, where dependence changes the GEV's
// parameters but not its form) and
//
//	rate(c) = (blocks per day) · P(block maximum > c)
//
// counts at most one alert per block, which holds at the rare levels of a
// budget (the off-delay merges the frames of one excursion). c solves
// rate(c) = budget: c = z_p, the GEV return level at p = budget · block /
// day. The whole alarm rule (alerts.Alarm per statistic, any active opens
// the unit's alert, off-delay and deadband included) is then run over the
// held-out frames at c to count the alerts it opens (Observed).
//
// When that count is not below budget · held-out days
// (heldOutAllowance), the GEV contradicts
// the data it was fitted to (an excursion the block maxima count once
// opens several alerts when the statistic hovers about the limit longer
// than the off-delay), and c is raised to the smallest scale whose count
// is within it (Calibration.GEVScale keeps the GEV's). On the realism
// suite this raised 7 of 10 units' scales by up to 24 % and took the
// false alerts per day summed over the plants from 9.2 to 8.4 at the
// same detections (README, Validation).
//
// The rate stated at the final scale (Rate, its interval and Week) comes
// from the held-out alerts, anchored at the next excursion below the
// scale and carried to it by the GEV (stateRate): the GEV's own rate
// there, GEVRate, understates it from 20 block maxima. DaysNeeded is the
// GEV's.
//
// learnDays, the span of normal log used for learning before the held-out
// part, only enters DaysNeeded.
func CalibrateBudget(t []time.Time, ratios [][nStatistics]float64, budget float64, rule alerts.AlarmRule, learnDays float64) (Calibration, error) {
	return calibrateBudgetFit(t, ratios, budget, rule, learnDays, nil)
}

// ruleMaxima is the rule statistic of a unit's held-out frames cut into
// blocks: s per frame, the block length, the maxima of the blocks with a
// score and the held-out exposure in days.
type ruleMaxima struct {
	s      []float64
	block  time.Duration
	maxima []float64
	days   float64
}

// blockRuleMaxima returns the rule statistic and its block maxima for
// CalibrateBudget: blocks short enough that the budget's level is
// exceeded in at most 1 block in 5 (one alert per block), long enough to
// be independent. On an error the returned Calibration holds what is
// known (the held-out days, the days needed).
func blockRuleMaxima(t []time.Time, ratios [][nStatistics]float64, budget float64, rule alerts.AlarmRule) (ruleMaxima, Calibration, error) {
	n := len(t)
	if n < 2 || len(ratios) != n {
		return ruleMaxima{}, Calibration{}, fmt.Errorf("%w: %d frames", ErrCalibration, n)
	}
	if !(budget > 0) {
		return ruleMaxima{}, Calibration{}, fmt.Errorf("%w: budget %v per day", ErrCalibration, budget)
	}
	span := t[n-1].Sub(t[0])
	days := heldOutExposureDays(t)
	block := span / heldOutBlocks
	block = min(max(block, minBlock), maxBlock, time.Duration(maxBlockShare/budget*24*float64(time.Hour)))
	nb := int(span / block)
	if nb < minBlocks {
		need := (float64(minBlocks)*minBlock.Hours()/24)/(1-CalibrationShare) + 0
		return ruleMaxima{}, Calibration{HeldOutDays: days, DaysNeeded: need}, fmt.Errorf("%w: %.2f days of held-out normal data give %d blocks of %v, need %d",
			ErrCalibration, days, nb, block, minBlocks)
	}
	// Rule statistic per frame: the largest over the statistics.
	s := ruleStat(ratios, 0, rule)
	for j := 1; j < nStatistics; j++ {
		for k, v := range ruleStat(ratios, j, rule) {
			s[k] = math.Max(s[k], v)
		}
	}
	// Block maxima, the blocks with a rule statistic.
	maxima := slices.DeleteFunc(blockMaxima(t, s, block, nb), math.IsNaN)
	if len(maxima) < minBlocks {
		return ruleMaxima{}, Calibration{HeldOutDays: days}, fmt.Errorf("%w: %d blocks with a score, need %d", ErrCalibration, len(maxima), minBlocks)
	}
	return ruleMaxima{s: s, block: block, maxima: maxima, days: days}, Calibration{HeldOutDays: days}, nil
}

// calibrateBudgetFit is CalibrateBudget with the GEV of the block maxima
// given (shared: a fit with the shape common to the plant's units,
// RatioRecorder.PoolShape) or, nil, fitted here.
func calibrateBudgetFit(t []time.Time, ratios [][nStatistics]float64, budget float64, rule alerts.AlarmRule, learnDays float64, shared *limits.GEVFit) (Calibration, error) {
	rm, partial, err := blockRuleMaxima(t, ratios, budget, rule)
	if err != nil {
		return partial, err
	}
	s, block, maxima, days := rm.s, rm.block, rm.maxima, rm.days
	var fit limits.GEVFit
	if shared != nil {
		fit = *shared
	} else if fit, err = limits.FitGEV(maxima); err != nil {
		return Calibration{HeldOutDays: days}, fmt.Errorf("%w: %w", ErrCalibration, err)
	}
	perDay := 24 * float64(time.Hour) / float64(block)
	p := budget / perDay
	cal := Calibration{Budget: budget, HeldOutDays: days, Blocks: len(maxima), Block: alerts.Duration(block),
		Mu: fit.Mu, Sigma: fit.Sigma, Xi: fit.Xi}
	if p >= 1 {
		return cal, fmt.Errorf("%w: a budget of %v per day is an alert in every block of %v", ErrCalibration, budget, block)
	}
	c := fit.ReturnLevel(p)
	if !(c > 0) || math.IsInf(c, 0) || math.IsNaN(c) {
		return cal, fmt.Errorf("%w: the GEV return level %v is not a usable scale", ErrCalibration, c)
	}
	pc, se := fit.ExceedSE(c)
	cal.Scale = c
	rel := cal.setRate(pc, se, perDay)
	// Too short: the interval is wider than a factor 2 either side; the
	// relative standard error falls as 1/√(blocks).
	if f := 1.96 * rel / math.Ln2; f > 1 {
		cal.DaysNeeded = (days + learnDays) * f * f
	}
	cal.Observed = countAlerts(t, ratios, c, rule)
	if allow := heldOutAllowance(budget, days); float64(cal.Observed) > allow {
		// The held-out data contradicts the GEV: raise the scale to the
		// smallest at which the whole rule opens at most the budget's
		// share of alerts over them.
		cal.GEVScale = c
		c = heldOutScale(t, ratios, s, c, allow, rule)
		pc, se = fit.ExceedSE(c)
		cal.Scale = c
		cal.setRate(pc, se, perDay)
		cal.Observed = countAlerts(t, ratios, c, rule)
	}
	cal.stateRate(fit, func(g limits.GEV, x float64) float64 { return g.Exceed(c * x) },
		func(x float64) int { return countAlerts(t, ratios, c*x, rule) }, perDay)
	return cal, nil
}

// setRate sets the calibration's alert rate per day, its standard error
// and 95 % interval from the GEV's block exceedance probability pc and its
// standard error se, with perDay blocks a day, and the week's predictive
// interval of the count; it returns the relative standard error. The
// rate's interval is on the log scale (P is positive and skewed).
// CalibrateBudget and calibrateEach state the final rate with stateRate.
func (cal *Calibration) setRate(pc, se, perDay float64) (rel float64) {
	if pc > 0 {
		rel = se / pc
	}
	cal.Rate = pc * perDay
	cal.RateSE = se * perDay
	cal.RateLow = cal.Rate * math.Exp(-1.96*rel)
	cal.RateHigh = cal.Rate * math.Exp(1.96*rel)
	w := cal.Predict(PredictWeekDays)
	cal.Week = &w
	return rel
}

// heldOutScale returns the smallest scale above lo (to a relative 10⁻⁹)
// at which the alarm rule opens at most allow alerts over the held-out
// frames, by bisection between lo and just above the largest rule
// statistic s (where it opens none). The count is not strictly monotone
// in the scale (a higher limit can split one excursion in two), so the
// result is checked, and the upper end kept if the bisection's is not
// within allow.
func heldOutScale(t []time.Time, ratios [][nStatistics]float64, s []float64, lo, allow float64, rule alerts.AlarmRule) float64 {
	hi := lo
	for _, v := range s {
		if !math.IsInf(v, 0) && !math.IsNaN(v) && v > hi {
			hi = v
		}
	}
	return leastWithin(lo, hi, allow, func(c float64) int { return countAlerts(t, ratios, c, rule) })
}

// leastWithin returns the smallest x above lo (to a relative 10⁻⁹) at
// which count(x) ≤ allow, by bisection between lo and just above hi
// (where the caller knows the count is 0). The count need not be
// monotone, so the bisection's end is checked and the upper end returned
// if it is not within allow (heldOutScale, raiseEach).
func leastWithin(lo, hi, allow float64, count func(float64) int) float64 {
	hi *= 1 + 1e-9
	top := hi
	for hi-lo > 1e-9*hi {
		mid := lo + (hi-lo)/2
		if float64(count(mid)) <= allow {
			hi = mid
		} else {
			lo = mid
		}
	}
	if float64(count(hi)) > allow {
		return top
	}
	return hi
}

// countAlerts runs the alarm rule (one alerts.Alarm per statistic, the
// unit's alert open while any is in alarm) over the frames with every
// limit multiplied by c and returns the number of alerts opened.
func countAlerts(t []time.Time, ratios [][nStatistics]float64, c float64, rule alerts.AlarmRule) int {
	var sc [nStatistics]float64
	for j := range sc {
		sc[j] = c
	}
	return countAlertsEach(t, ratios, sc, rule)
}

// PoolUnit names a unit for PoolShape with its budget and alarm rule.
type PoolUnit struct {
	Name   string
	Budget float64
	Rule   alerts.AlarmRule
}

// SharedShape is what PoolShape found, for fit's summary.
type SharedShape struct {
	// Units are the units whose block maxima were fitted together, Own
	// their own shapes ξ̂ᵤ (each fitted alone; NaN where that fit failed,
	// and then LR and P are NaN too) and Xi the common one.
	Units []string
	Own   []float64
	Xi    float64
	// LR is the likelihood-ratio statistic 2(Σᵤ ℓ̂ᵤ − ℓ̂_common) of the
	// units' own fits against the common shape and P its χ² tail
	// probability on len(Units) − 1 degrees of freedom: how much more the
	// held-out shapes differ than chance would make them (Coles 2001,
	// §2.6.6, the deviance of nested models). Stated, not a gate (see
	// PoolShape).
	LR, P float64
}

// PoolShape fits the held-out block maxima of the units' rule statistics
// (those CalibrateBudget would fit: not the units with a smoothed
// statistic, calibrated per statistic or leaving out operating-point
// excursions, which keep their own fit) with one GEV shape common to them
// (limits.FitGEVCommonShape) and keeps each unit's fit for Calibrate.
// A unit whose block maxima are all equal is left out (no GEV fits them);
// one whose own fit fails otherwise (a singular observed information at
// a shape near −1) is pooled, and the shared shape calibrates it. With fewer
// than two such units nothing is pooled; when the common fit
// fails, every unit keeps its own fit and the error says why.
//
// The common shape is kept even where the likelihood-ratio statistic
// (SharedShape.P) says the held-out shapes differ: a unit's shape from 20
// to 30 maxima of two days is mostly noise, and pooling a moderately
// heterogeneous group still estimates the rare levels better than each
// alone (Hosking & Wallis 1997, ch. 7, from memory). Measured on the
// realism suite over twenty seeds (README, Validation): a 5 % test would
// reject the common shape in 16 of 80 runs, and those runs' test days
// bore the shared shape out (the district heating's false alerts 70 with
// it, 97 with the test as a gate).
func (rr *RatioRecorder) PoolShape(units []PoolUnit, perStat, points func(name string) bool) (SharedShape, error) {
	rr.shape = nil
	var sh SharedShape
	var xs [][]float64
	var ownLL []float64
	for _, u := range units {
		ser := rr.units[u.Name]
		if ser == nil || len(ser.t) == 0 || !(u.Budget > 0) || perStat(u.Name) || points(u.Name) {
			continue
		}
		if hasStat(ser.r, slotMewma) || hasStat(ser.r, slotCreep) {
			continue
		}
		rm, _, err := blockRuleMaxima(ser.t, ser.r, u.Budget, u.Rule)
		if err != nil {
			continue
		}
		lo, hi := slices.Min(rm.maxima), slices.Max(rm.maxima)
		if !(hi-lo > 1e-9*math.Max(math.Abs(hi), 1)) {
			continue // every maximum the same: CalibrateBudget says why
		}
		f, err := limits.FitGEV(rm.maxima)
		if err != nil && !(f.Sigma > 0) {
			f.Xi, f.LogLik = math.NaN(), math.NaN() // no own fit: no test
		}
		sh.Units = append(sh.Units, u.Name)
		sh.Own = append(sh.Own, f.Xi)
		ownLL = append(ownLL, f.LogLik)
		xs = append(xs, rm.maxima)
	}
	if len(xs) < 2 {
		return sh, nil
	}
	fits, err := limits.FitGEVCommonShape(xs)
	if err != nil {
		return sh, err
	}
	sh.Xi = fits[0].Xi
	own := 0.0
	for u := range xs {
		own += ownLL[u] - fits[u].LogLik
	}
	sh.LR, sh.P = math.NaN(), math.NaN()
	if !math.IsNaN(own) {
		sh.LR = math.Max(2*own, 0)
		sh.P = distuv.ChiSquared{K: float64(len(xs) - 1)}.Survival(sh.LR)
	}
	rr.shape = map[string]limits.GEVFit{}
	for u, n := range sh.Units {
		rr.shape[n] = fits[u]
	}
	return sh, nil
}
