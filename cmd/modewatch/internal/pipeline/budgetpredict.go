package pipeline

import (
	"math"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"
)

// Predictive interval settings.
const (
	// PredictLevel is the level of [Calibration.Predict]'s interval.
	PredictLevel = 0.95
	// PredictWeekDays is the horizon of Calibration.Week, days.
	PredictWeekDays = 7
	// maxGammaShape: above it the rate is known so well that the count is
	// Poisson (the negative binomial's shape goes to infinity).
	maxGammaShape = 1e8
	// maxPredictCount bounds the expected count Predict takes: beyond it
	// the count's quantiles would not fit the search's int (a rate no fit
	// states, from a model file say).
	maxPredictCount = 1 << 30
)

// Prediction is a predictive interval of the number of false alerts a
// unit's alarm rule opens over Days of normal operation at its calibrated
// limits ([Calibration.Predict]). Unlike the rate's interval (RateLow,
// RateHigh: where the true rate per day lies), it says how many alerts to
// expect to count, with the chance of counting adding to the uncertainty
// of the rate: a count of zero lies inside it whenever that is likely.
type Prediction struct {
	// Days is the horizon, days.
	Days float64 `json:"days"`
	// Expected is the mean count, Rate · Days.
	Expected float64 `json:"expected"`
	// Low and High are the predictive count's (1 − PredictLevel)/2 and
	// (1 + PredictLevel)/2 quantiles (the smallest k with P(N ≤ k) at
	// least that), so that P(N < Low) and P(N > High) are each at most
	// (1 − PredictLevel)/2. Divided by Days they bound the measured rate
	// per day: LowPerDay and HighPerDay, the measured rate's predictive
	// interval. An invalid horizon, rate or standard error (negative, NaN
	// or infinite), or an expected count above maxPredictCount, gives NaN
	// Expected and Coverage and a zero interval.
	Low        int     `json:"low"`
	High       int     `json:"high"`
	LowPerDay  float64 `json:"low_per_day"`
	HighPerDay float64 `json:"high_per_day"`
	// Coverage is the predictive probability of Low ≤ N ≤ High, at least
	// PredictLevel (a count is discrete).
	Coverage float64 `json:"coverage"`
}

// Predict returns the PredictLevel predictive interval of the number N of
// false alerts over days of normal operation (days > 0), from the
// calibration's rate Rate and its standard error RateSE, both per day.
//
// The rate is uncertain: its estimate comes from a few dozen block maxima.
// Its sampling distribution is taken as a gamma of the same mean and
// standard deviation, and N given the rate is Poisson; N is then negative
// binomial, the gamma–Poisson mixture (Gelman et al. 2013, Bayesian Data
// Analysis, 3rd ed., §2.6 and Appendix A; Greenwood & Yule 1920, J. R.
// Stat. Soc. 83; both quoted from memory):
//
//	λ ~ Gamma(a, b),  a = (Rate/RateSE)²,  b = a/Rate (days)
//	N | λ ~ Poisson(λ · days)
//	P(N = k) = Γ(a+k) / (Γ(a) k!) · q^a (1−q)^k,  q = b/(b + days)
//	P(N ≤ k) = I_q(a, k+1)  (regularized incomplete beta)
//
// with mean Rate·days and variance Rate·days + (RateSE·days)²: Poisson
// noise plus the rate's uncertainty. a is the number of alerts that would
// pin the rate as well as the fit does, b the days they would take. With
// RateSE = 0 (or a above 10⁸) N is Poisson(Rate·days); with a so small
// that it underflows to 0 (RateSE ≫ Rate), N is 0 with certainty, the
// limit of P(N = 0) = q^a as a → 0. It carries the
// rate's sampling error, not a bias of the rate (fit's rate comes from
// the held-out alerts, stateRate, because the GEV's own understates it
// from 20 block maxima).
func (c Calibration) Predict(days float64) Prediction {
	p := Prediction{Days: days, Expected: c.Rate * days, Coverage: 1}
	switch {
	case !(days > 0) || math.IsInf(days, 0) || !(c.Rate >= 0) || math.IsInf(c.Rate, 0) || !(c.RateSE >= 0) ||
		math.IsInf(c.RateSE, 0) || !(p.Expected <= maxPredictCount):
		p.Expected, p.Coverage = math.NaN(), math.NaN()
		return p
	case c.Rate == 0:
		return p
	}
	cdf := c.countCDF(days)
	tail := (1 - PredictLevel) / 2
	p.Low = countQuantile(cdf, tail, p.Expected)
	p.High = countQuantile(cdf, 1-tail, p.Expected)
	p.Coverage = cdf(p.High) - cdf(p.Low-1)
	p.LowPerDay, p.HighPerDay = float64(p.Low)/days, float64(p.High)/days
	return p
}

// countCDF returns k ↦ P(N ≤ k) of the predictive count over days
// (Predict).
func (c Calibration) countCDF(days float64) func(k int) float64 {
	mean := c.Rate * days
	a := math.Inf(1)
	if c.RateSE > 0 {
		a = (c.Rate / c.RateSE) * (c.Rate / c.RateSE)
	}
	if a > maxGammaShape {
		return func(k int) float64 { return distuv.Poisson{Lambda: mean}.CDF(float64(k)) }
	}
	q := a / (a + mean) // b/(b+days) with b = a/Rate
	return func(k int) float64 {
		switch {
		case k < 0:
			return 0
		case a == 0 || q == 0:
			return 1 // the shape's limit: no alert (RegIncBeta needs a, q > 0)
		}
		return mathext.RegIncBeta(a, float64(k)+1, q)
	}
}

// countQuantile returns the smallest k ≥ 0 with cdf(k) ≥ prob, for a
// count of mean mean: the upper end is doubled from about the mean until
// it holds, then bisected.
func countQuantile(cdf func(int) float64, prob, mean float64) int {
	if cdf(0) >= prob {
		return 0
	}
	lo, hi := 0, max(1, int(math.Ceil(mean)))
	for cdf(hi) < prob {
		if hi > math.MaxInt32 {
			return hi
		}
		lo, hi = hi, 2*hi
	}
	// cdf(lo) < prob ≤ cdf(hi)
	for hi-lo > 1 {
		mid := lo + (hi-lo)/2
		if cdf(mid) >= prob {
			hi = mid
		} else {
			lo = mid
		}
	}
	return hi
}
