package pipeline

import (
	"math"
	"time"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/stat/distuv"

	"modewatch/tracker/limits"
)

// The false-alert rate fit states at the calibrated scale.
//
// The scale CalibrateBudget settles on is fixed by the GEV's return level
// and the held-out raise; the rate it states there must hold the true
// rate, and a GEV fitted to 20 block maxima (2 to 4 held-out days) does
// not: its maximum-likelihood fit with a free shape understates the rate
// at its own scale by about 1.6 times, and after the raise the GEV's rate
// at the raised scale is about half the true one (README, False-alert
// budget). The held-out alerts themselves pin the rate without a model:
//
//   - let L₁ > L₂ > … be the levels of the held-out excursions (the rule
//     opens j alerts at scale c when c lies in [L_(j+1), L_j)). Alerts at
//     high levels are rare and nearly independent, so they form a
//     Poisson process in the rate λ(c): λ(L_i)·D, for D held-out days, are
//     the points of a unit-rate Poisson process and λ(L_(j+1))·D is
//     Gamma(j+1, 1) whatever the statistic's distribution (the order
//     statistics of a Poisson process; the pivot behind Garwood's exact
//     interval, Garwood 1936, Biometrika 28; from memory);
//   - the final scale c opens j = Observed held-out alerts. After a raise
//     it is L_(j+1) itself (the smallest scale within the allowance), so
//     λ(c)·D is Gamma(j+1, 1): mean (j+1)/D. Without a raise c lies above
//     L_(j+1), and the GEV carries the rate from the anchor L_(j+1) up to
//     c, a short step inside the data:
//
//     λ(c) = λ(L_(j+1)) · r,  r = Λ(c)/Λ(L_(j+1)),  Λ(z) = −ln(1 − P(z))
//
//     with P the GEV's block exceedance probability (the empirical rate of
//     a threshold times the model's tail beyond it, as in the return
//     levels of Coles 2001, §4.3.3, there with a binomial count);
//   - Λ = −ln(1 − P) counts the Poisson mean of alerts per block, not the
//     chance of at least one: at P = 0.2 a block holds 0.223 on average
//     (the Poisson limit of exceedances, Coles 2001, §4.2 and ch. 5 on
//     the extremal index, from memory).
//
// The stated rate is (j+1)/D · r. Its interval needs no model: λ(c)·D
// lies between the j-th and (j+1)-th points, so between Gamma(j, 1)'s
// 2.5 % and Gamma(j+1, 1)'s 97.5 % quantiles (Garwood's exact interval
// for j events in D days), and after a raise, where it is the (j+1)-th
// point, between Gamma(j+1, 1)'s 2.5 % and 97.5 % quantiles. Its standard
// error, which Predict's gamma–Poisson mixture carries over to counts, is
// the gamma's, relative variance 1/(j+1), plus the GEV's in log r by the
// delta method (Coles 2001, §2.6.4): RateSE = Rate/√a, a = 1/(1/(j+1) +
// Var log r). D is the held-out exposure, the frames times their period.
// When no anchor lies below c (the rule opens at most j alerts at every
// lower scale) the GEV's rate is stated, with a gamma interval of its
// delta-method standard error.

// heldOutExposureDays returns the days n frames at times t stand for: the
// span from the first to the last times n/(n−1), n times the mean frame
// period (the span alone counts one period short).
func heldOutExposureDays(t []time.Time) float64 {
	n := len(t)
	if n < 2 {
		return 0
	}
	return t[n-1].Sub(t[0]).Hours() / 24 * float64(n) / float64(n-1)
}

// heldOutAllowance returns the most alerts the whole rule may open over
// days of held-out data at budget alerts a day: fewer than budget·days,
// ⌈budget·days⌉ − 1, and at least 0. When the GEV's scale opens more, the
// raise puts the scale at the level of the (allowance+1)-th held-out
// excursion, whose rate averages (allowance+1)/days (the Gamma pivot
// above): at most one alert over the budget's count, and exactly the
// budget when budget·days is a whole number (⌊budget·days⌋ allowed one
// more there: twice the budget at one alert's worth of days).
func heldOutAllowance(budget, days float64) float64 {
	return max(math.Ceil(budget*days)-1, 0)
}

// gevBlockRate returns the mean number of alerts per block, −ln(1 − P),
// for block exceedance probability P.
func gevBlockRate(p float64) float64 { return -math.Log1p(-p) }

// stateRate sets cal's stated rate (Rate, RateSE, RateLow, RateHigh,
// GEVRate and Week) at its final scales, as above. count(x) is the
// number of alerts the whole rule opens over the held-out frames with
// every final scale multiplied by x; exceed(g, x) the block exceedance
// probability of the rule there under the GEV g of fit; perDay the
// blocks per day. cal.Observed must be count(1) and cal.HeldOutDays the
// held-out exposure.
func (cal *Calibration) stateRate(fit limits.GEVFit, exceed func(g limits.GEV, x float64) float64, count func(x float64) int, perDay float64) {
	p1 := exceed(fit.GEV, 1)
	cal.GEVRate = gevBlockRate(p1) * perDay
	j := cal.Observed
	days := cal.HeldOutDays
	xa, ok := rateAnchor(count, j)
	if !ok || !(days > 0) {
		// No anchor: the GEV's rate with its delta-method interval.
		se := 0.0
		if cal.GEVRate > 0 {
			g := logGradient(fit, func(g limits.GEV) float64 { return math.Log(gevBlockRate(exceed(g, 1))) })
			se = math.Sqrt(quadCov(fit, g)) * cal.GEVRate
		}
		cal.setGamma(cal.GEVRate, se)
		return
	}
	r, v := 1.0, 0.0
	if xa < 1 {
		h := func(g limits.GEV) float64 {
			return math.Log(gevBlockRate(exceed(g, 1))) - math.Log(gevBlockRate(exceed(g, xa)))
		}
		if lr := h(fit.GEV); lr < 0 && !math.IsNaN(lr) {
			r = math.Exp(lr)
			v = quadCov(fit, logGradient(fit, h))
		}
	}
	k := float64(j + 1)
	a := 1 / (1/k + v)
	// The exact interval: λ(c)·D lies between the j-th and the (j+1)-th
	// points, at the (j+1)-th after a raise.
	hi := distuv.Gamma{Alpha: k, Beta: 1}.Quantile(0.975) / days
	lo := 0.0
	switch {
	case xa == 1:
		lo = distuv.Gamma{Alpha: k, Beta: 1}.Quantile(0.025) / days
	case j > 0:
		lo = distuv.Gamma{Alpha: float64(j), Beta: 1}.Quantile(0.025) / days
	}
	cal.Rate = min(max(k/days*r, lo), hi)
	cal.RateSE = cal.Rate / math.Sqrt(a)
	cal.RateLow, cal.RateHigh = lo, hi
	w := cal.Predict(PredictWeekDays)
	cal.Week = &w
}

// setGamma states rate mean with standard error se per day: RateLow and
// RateHigh are the 2.5 % and 97.5 % quantiles of the gamma with that mean
// and standard error (Predict's model of the rate), and Week the week's
// predictive interval.
func (cal *Calibration) setGamma(mean, se float64) {
	cal.Rate, cal.RateSE = mean, se
	cal.RateLow, cal.RateHigh = mean, mean
	if mean > 0 && se > 0 && !math.IsInf(se, 0) {
		a := (mean / se) * (mean / se)
		g := distuv.Gamma{Alpha: a, Beta: a / mean}
		cal.RateLow, cal.RateHigh = g.Quantile(0.025), g.Quantile(0.975)
	}
	w := cal.Predict(PredictWeekDays)
	cal.Week = &w
}

// rateAnchor returns the multiplier x ≤ 1 of the final scales at the
// anchor L_(j+1): the smallest at which the rule opens at most j held-out
// alerts (to a relative 10⁻⁹, leastWithin), 1 when a scale just below the
// final one opens more (after a raise). ok is false when even a
// thousandth of the final scales opens at most j: no excursion anchors
// the rate.
func rateAnchor(count func(float64) int, j int) (x float64, ok bool) {
	if count(1-1e-7) > j {
		return 1, true
	}
	lo := 0.5
	for count(lo) <= j {
		if lo < 1e-3 {
			return 0, false
		}
		lo /= 2
	}
	return min(leastWithin(lo, 1, float64(j), count), 1), true
}

// logGradient returns the gradient of h over the GEV's (μ, σ, ξ) at the
// fit, by central differences.
func logGradient(fit limits.GEVFit, h func(limits.GEV) float64) [3]float64 {
	var g [3]float64
	dst := make([]float64, 3)
	fd.Gradient(dst, func(v []float64) float64 { return h(limits.GEV{Mu: v[0], Sigma: v[1], Xi: v[2]}) },
		[]float64{fit.Mu, fit.Sigma, fit.Xi}, &fd.Settings{Formula: fd.Central, Step: 1e-6 * math.Max(fit.Sigma, 1e-12)})
	copy(g[:], dst)
	return g
}

// quadCov returns gᵀ Cov g for the fit's covariance (0 if not finite).
func quadCov(fit limits.GEVFit, g [3]float64) float64 {
	s := 0.0
	for i := range 3 {
		for j := range 3 {
			s += g[i] * fit.Cov[i][j] * g[j]
		}
	}
	if math.IsNaN(s) || math.IsInf(s, 0) || s < 0 {
		return 0
	}
	return s
}
