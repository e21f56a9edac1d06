package pipeline

import (
	"math"
	"slices"
	"time"

	"modewatch/alerts"
	"modewatch/tracker/limits"
)

// Per-statistic scales of the budget calibration (alerts.budget with
// alerts.budget_per_statistic, the default).
//
// One scale for every limit of a unit lets the statistic with the
// heaviest tail on the held-out data set it for all: on a short normal
// log a setpoint step the first part never saw drives T² (a move to a new
// operating point) far over its limit while SPE and the residual
// statistic stay near theirs (the relations hold), and the one scale then
// blinds the statistics that see broken relations. Instead every
// statistic gets its own scale at the same tail probability, and that
// probability is set so that the whole rule meets the budget:
//
//   - per statistic j, the rule statistic (the N-th largest ratio of the
//     last M frames) has block maxima m_j,b, fitted by a GEV F_j;
//   - each block maximum is put on the standard Gumbel scale by its own
//     GEV, y_j,b = −log(−log F_j(m_j,b)), so that the statistics are
//     comparable (the marginal standardization of multivariate extremes,
//     Coles 2001, §8.2.1, there to the unit Fréchet scale, here to its
//     logarithm);
//   - the rule opens in block b at common tail level y exactly when
//     Y_b = max_j y_j,b exceeds y; a GEV G fitted to Y_b gives y* with
//     rate(y*) = (blocks per day)·P(Y > y*) = budget;
//   - statistic j's scale is F_j's level at y*: s_j = F_j⁻¹(exp(−e^(−y*))),
//     every statistic exceeded in a block with the same probability.
//
// The held-out check of CalibrateBudget applies unchanged: when the whole
// rule at these scales opens more alerts over the held-out frames than the
// budget allows there, every scale is raised by the smallest common factor
// that does not. A statistic with too few blocks or no GEV fit keeps the
// unit's single scale.

// gumbelY returns −log(−log G(z)) for the GEV g: z on the standard
// Gumbel scale, clamped to ±gumbelCap beyond the support's ends.
func gumbelY(g limits.GEV, z float64) float64 {
	y := (z - g.Mu) / g.Sigma
	if math.Abs(g.Xi) >= 1e-7 {
		b := 1 + g.Xi*y
		if b <= 0 {
			if g.Xi > 0 {
				return -gumbelCap
			}
			return gumbelCap
		}
		y = math.Log(b) / g.Xi
	}
	return min(max(y, -gumbelCap), gumbelCap)
}

// gumbelLevel is the inverse of gumbelY: the level z of g at standard
// Gumbel value y.
func gumbelLevel(g limits.GEV, y float64) float64 {
	if math.Abs(g.Xi) < 1e-7 {
		return g.Mu + g.Sigma*y
	}
	return g.Mu + g.Sigma*math.Expm1(g.Xi*y)/g.Xi
}

// gumbelCap bounds the standard Gumbel values (e^−40 is far below any
// budget's block probability).
const gumbelCap = 40.0

// ruleStat returns the rule statistic of statistic j per frame (the N-th
// largest of its ratios over the last M frames; −Inf without N values).
func ruleStat(ratios [][nStatistics]float64, j int, rule alerts.AlarmRule) []float64 {
	n := len(ratios)
	s := make([]float64, n)
	w := make([]float64, 0, rule.M)
	for k := 0; k < n; k++ {
		w = w[:0]
		for i := max(0, k-rule.M+1); i <= k; i++ {
			if v := ratios[i][j]; !math.IsNaN(v) {
				w = append(w, v)
			}
		}
		if len(w) < rule.N {
			s[k] = math.Inf(-1)
			continue
		}
		slices.Sort(w)
		s[k] = w[len(w)-rule.N]
	}
	return s
}

// blockMaxima returns, per block of length block from t[0] (the first
// nb), the largest finite s in it, NaN for a block without one.
func blockMaxima(t []time.Time, s []float64, block time.Duration, nb int) []float64 {
	m := make([]float64, nb)
	for i := range m {
		m[i] = math.NaN()
	}
	for k := range t {
		b := int(t[k].Sub(t[0]) / block)
		if b >= nb {
			break
		}
		if math.IsInf(s[k], -1) || math.IsNaN(s[k]) {
			continue
		}
		if math.IsNaN(m[b]) || s[k] > m[b] {
			m[b] = s[k]
		}
	}
	return m
}

// statGroups assigns each statistic (slot of statNames) to a group of
// the per-statistic calibration: the statistics of one group share one
// scale, set by the largest of their rule statistics.
type statGroups [nStatistics]int

// eachOwn puts every statistic in a group of its own
// (alerts.budget_per_statistic).
var eachOwn = statGroups{0, 1, 2, 3, 4, 5, 6, 7}

// smoothedSlots are the statistics smoothed over many frames (the MEWMA
// and the creep statistic).
var smoothedSlots = [...]int{slotMewma, slotCreep}

// smoothedOwn gives each smoothed statistic a scale of its own and the
// others one scale together: smoothing makes a statistic far more
// serially correlated than the per-frame statistics, so that one scale
// for all would be set by it (blinding the others) or, without it, leave
// it alarming for hours.
var smoothedOwn = func() (g statGroups) {
	for k, j := range smoothedSlots {
		g[j] = 1 + k
	}
	return g
}()

// hasStat reports whether statistic j has a finite ratio in some frame.
func hasStat(ratios [][nStatistics]float64, j int) bool {
	for k := range ratios {
		if !math.IsNaN(ratios[k][j]) {
			return true
		}
	}
	return false
}

// statScales computes the per-statistic scales (see above) for block
// exceedance probability p of the whole rule, over nb blocks of length
// block, the statistics of a group of gr (statGroups) taken together, and
// each statistic's GEV, its group's (nil: none). ok is false when fewer
// than two groups have a GEV fit or the combined fit fails (the unit's
// single scale is kept); scales[j] is 0 for a statistic without a fit or
// without ratios. fit is the GEV of the combined maxima Y_b and y its
// level for p.
func statScales(t []time.Time, ratios [][nStatistics]float64, rule alerts.AlarmRule, block time.Duration, nb int, p float64, gr statGroups) (scales [nStatistics]float64, fits [nStatistics]*limits.GEVFit, fit limits.GEVFit, y float64, ok bool) {
	var rs [nStatistics][]float64 // rule statistic per group
	for j := 0; j < nStatistics; j++ {
		s, g := ruleStat(ratios, j, rule), gr[j]
		if rs[g] == nil {
			rs[g] = s
			continue
		}
		for k, v := range s {
			rs[g][k] = math.Max(rs[g][k], v)
		}
	}
	var maxima [nStatistics][]float64
	fitted := 0
	for j := 0; j < nStatistics; j++ {
		if rs[j] == nil {
			continue
		}
		m := blockMaxima(t, rs[j], block, nb)
		var have []float64
		for _, v := range m {
			if !math.IsNaN(v) {
				have = append(have, v)
			}
		}
		if len(have) < minBlocks {
			continue
		}
		fitGEV := limits.FitGEV
		if unboundedTail(gr, j) {
			fitGEV = limits.FitGEVUnbounded
		}
		f, err := fitGEV(have)
		if err != nil || !(f.Sigma > 0) {
			continue
		}
		fits[j], maxima[j] = &f, m
		fitted++
	}
	if fitted < 2 {
		return scales, fits, fit, 0, false
	}
	var comb []float64
	for b := 0; b < nb; b++ {
		best, have := math.Inf(-1), false
		for j := range fits {
			if fits[j] == nil || math.IsNaN(maxima[j][b]) {
				continue
			}
			best, have = math.Max(best, gumbelY(fits[j].GEV, maxima[j][b])), true
		}
		if have {
			comb = append(comb, best)
		}
	}
	if len(comb) < minBlocks {
		return scales, fits, fit, 0, false
	}
	f, err := limits.FitGEV(comb)
	if err != nil {
		return scales, fits, fit, 0, false
	}
	y = f.ReturnLevel(p)
	if math.IsNaN(y) || math.IsInf(y, 0) {
		return scales, fits, fit, 0, false
	}
	y = min(y, gumbelCap)
	for j := range fits {
		if fits[j] == nil {
			continue
		}
		c := gumbelLevel(fits[j].GEV, y)
		if !(c > 0) || math.IsInf(c, 0) {
			return scales, fits, fit, 0, false
		}
		scales[j] = c
	}
	// From groups to their statistics.
	gs, gf := scales, fits
	for j := range scales {
		scales[j], fits[j] = 0, nil
		if hasStat(ratios, j) {
			scales[j], fits[j] = gs[gr[j]], gf[gr[j]]
		}
	}
	return scales, fits, f, y, true
}

// countAlertsEach is countAlerts with statistic j's limit multiplied by
// sc[j] (0: that statistic raises no alarm).
func countAlertsEach(t []time.Time, ratios [][nStatistics]float64, sc [nStatistics]float64, rule alerts.AlarmRule) int {
	var al [nStatistics]alerts.Alarm
	for j := range al {
		al[j] = alerts.NewAlarm(rule)
	}
	open, count := false, 0
	for k := range t {
		in := false
		for j := range al {
			if v := ratios[k][j]; !math.IsNaN(v) && sc[j] > 0 {
				al[j].Step(t[k], v, sc[j])
			}
			in = in || al[j].State().InAlarm()
		}
		if in && !open {
			count++
		}
		open = in
	}
	return count
}

// raiseEach returns the smallest common factor λ ≥ 1 (to a relative
// 10⁻⁹) by which the scales sc must be multiplied for the rule to open at
// most allow alerts over the held-out frames, by bisection up to the
// factor at which no ratio reaches its limit (leastWithin, as heldOutScale).
func raiseEach(t []time.Time, ratios [][nStatistics]float64, sc [nStatistics]float64, allow float64, rule alerts.AlarmRule) float64 {
	mul := func(l float64) [nStatistics]float64 {
		var out [nStatistics]float64
		for j := range sc {
			out[j] = l * sc[j]
		}
		return out
	}
	hi := 1.0
	for k := range ratios {
		for j, v := range ratios[k] {
			if sc[j] > 0 && !math.IsNaN(v) && !math.IsInf(v, 0) {
				hi = math.Max(hi, v/sc[j])
			}
		}
	}
	return leastWithin(1, hi, allow, func(l float64) int { return countAlertsEach(t, ratios, mul(l), rule) })
}

// calibrateEach adds the per-statistic scales to cal, the unit's single
// scale calibration from CalibrateBudget over the same frames, when at
// least two statistics have a fit; cal's rate, interval and held-out count
// then describe the rule at those scales.
func calibrateEach(cal *Calibration, t []time.Time, ratios [][nStatistics]float64, rule alerts.AlarmRule) {
	calibrateGroups(cal, t, ratios, rule, eachOwn)
}

// calibrateGroups is calibrateEach with one scale per group of gr.
func calibrateGroups(cal *Calibration, t []time.Time, ratios [][nStatistics]float64, rule alerts.AlarmRule, gr statGroups) {
	if cal.Blocks < minBlocks || !(cal.Block > 0) {
		return
	}
	block := time.Duration(cal.Block)
	nb := int(t[len(t)-1].Sub(t[0]) / block)
	perDay := 24 * float64(time.Hour) / float64(block)
	p := cal.Budget / perDay
	sc, fits, fit, y, ok := statScales(t, ratios, rule, block, nb, p, gr)
	if !ok {
		return
	}
	pc, se := fit.ExceedSE(y)
	if allow := heldOutAllowance(cal.Budget, cal.HeldOutDays); float64(countAlertsEach(t, ratios, sc, rule)) > allow {
		l := raiseEach(t, ratios, sc, allow, rule)
		for j := range sc {
			sc[j] *= l
		}
		// The rule opens in a block at the raised scales only if some
		// y_j,b exceeds its statistic's level there, so only if Y_b
		// exceeds the smallest of those levels: the rate at it is an
		// upper bound.
		y = gumbelCap
		for j := range sc {
			if g := fits[j]; g != nil {
				y = min(y, gumbelY(g.GEV, sc[j]))
			}
		}
		pc, se = fit.ExceedSE(y)
	}
	cal.Scales = map[string]float64{}
	for j, c := range sc {
		if c > 0 {
			cal.Scales[statNames[j]] = c
		}
	}
	cal.setRate(pc, se, perDay)
	cal.Observed = countAlertsEach(t, ratios, sc, rule)
	mul := func(x float64) [nStatistics]float64 {
		var out [nStatistics]float64
		for j := range sc {
			out[j] = x * sc[j]
		}
		return out
	}
	// The rule opens in a block at scales x·sc only if Y_b exceeds the
	// smallest of the statistics' levels there (as after a raise above).
	exceed := func(g limits.GEV, x float64) float64 {
		y := gumbelCap
		for j := range sc {
			if f := fits[j]; f != nil {
				y = min(y, gumbelY(f.GEV, x*sc[j]))
			}
		}
		return g.Exceed(y)
	}
	cal.stateRate(fit, exceed, func(x float64) int { return countAlertsEach(t, ratios, mul(x), rule) }, perDay)
}

// calibrateSmoothed calibrates a unit whose statistics include a
// statistic smoothed over many frames, the MEWMA or the creep statistic
// (and not alerts.budget_per_statistic): the other statistics are
// calibrated by CalibrateBudget without them, to the same single scale as
// without them, then the groups (smoothedOwn: the per-frame statistics
// together, each smoothed statistic alone) get their scales at the same
// tail probability and the whole rule at the budget (calibrateGroups).
// A smoothed statistic whose block maxima give no GEV fit (a tail too
// heavy for 20 maxima) gets the smallest scale at or above the others' at
// which the whole rule opens at most the budget's share of alerts over
// the held-out frames, the smoothed statistics in slot order.
func calibrateSmoothed(t []time.Time, ratios [][nStatistics]float64, budget float64, rule alerts.AlarmRule, learnDays float64) (Calibration, error) {
	rest := make([][nStatistics]float64, len(ratios))
	for k, row := range ratios {
		for _, j := range smoothedSlots {
			row[j] = math.NaN()
		}
		rest[k] = row
	}
	cal, err := CalibrateBudget(t, rest, budget, rule, learnDays)
	if err != nil {
		return cal, err
	}
	calibrateGroups(&cal, t, ratios, rule, smoothedOwn)
	var sc [nStatistics]float64
	var todo []int
	for j := range sc {
		if !hasStat(ratios, j) {
			continue
		}
		c, ok := cal.Scales[statNames[j]]
		switch {
		case ok:
			sc[j] = c
		case slices.Contains(smoothedSlots[:], j):
			todo = append(todo, j)
		default:
			sc[j] = cal.Scale
		}
	}
	if len(todo) == 0 {
		return cal, nil
	}
	if len(todo) == len(smoothedSlots) || len(cal.Scales) == 0 {
		// No group scales: the others keep the single scale.
		for j := range sc {
			if sc[j] > 0 {
				sc[j] = cal.Scale
			}
		}
	}
	allow := heldOutAllowance(budget, cal.HeldOutDays)
	for _, j := range todo {
		hi := cal.Scale
		for k := range ratios {
			if v := ratios[k][j]; !math.IsNaN(v) && !math.IsInf(v, 0) {
				hi = math.Max(hi, v)
			}
		}
		sc[j] = leastWithin(cal.Scale, hi, allow, func(c float64) int {
			s := sc
			s[j] = c
			return countAlertsEach(t, ratios, s, rule)
		})
	}
	cal.Scales = map[string]float64{}
	for j, c := range sc {
		if c > 0 {
			cal.Scales[statNames[j]] = c
		}
	}
	cal.Observed = countAlertsEach(t, ratios, sc, rule)
	return cal, nil
}
