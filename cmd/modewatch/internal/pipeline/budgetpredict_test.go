package pipeline

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/stat/distuv"

	"modewatch/alerts"
)

// calibrationAt returns a calibration whose rate has mean rate and gamma
// shape a (RateSE = rate/√a) for Predict.
func calibrationAt(rate, a float64) Calibration {
	return Calibration{Rate: rate, RateSE: rate / math.Sqrt(a)}
}

// TestPredictNegativeBinomial checks the predictive count's distribution
// (the gamma–Poisson mixture, negative binomial) against outside values:
//   - mpmath 1.3.0 at 30 digits, summing the negative binomial's pmf
//     Γ(a+k)/(Γ(a)k!)·q^a(1−q)^k term by term (a general-purpose
//     reference library; script: loggamma, exp, 30 dps), for three shapes;
//   - the closed form of shape a = 1, the geometric distribution,
//     P(N ≤ k) = 1 − (1−q)^(k+1), and its quantiles by hand;
//   - for an integer shape, the classical identity with the binomial
//     (Johnson, Kemp & Kotz, Univariate Discrete Distributions, 3rd ed.,
//     ch. 5, from memory): P(N ≤ k) = P(Binomial(k+a, q) ≥ a), with
//     gonum's distuv.Binomial;
//   - the mixture itself, the Poisson integrated over the gamma's
//     quantiles, ∫₀¹ P(Poisson(D·G⁻¹(u)) ≤ k) du, with gonum's
//     distuv.Gamma, distuv.Poisson and quad (Legendre);
//   - with no uncertainty in the rate, the Poisson: mean 1.25, P(N ≤ 3)
//     = 0.9617 and P(N ≤ 4) = 0.9909 (hand computation), so [0, 4].
func TestPredictNegativeBinomial(t *testing.T) {
	t.Run("mpmath", func(t *testing.T) {
		for _, c := range []struct {
			name        string
			a, rate, d  float64
			cdf         map[int]float64
			low, high   int
			coverageMin float64
		}{
			{"a=0.6, mean 0.5", 0.6, 0.25, 2, map[int]float64{0: 0.69511256525103, 1: 0.884688719410402, 2: 0.953625502741083, 3: 0.980782417386502, 10: 0.999945904530369}, 0, 3, 0.980782417386502},
			{"a=2.5, mean 1.25", 2.5, 0.25, 5, map[int]float64{0: 0.362887369301212, 1: 0.665293510385555, 3: 0.929898883834355, 5: 0.987842560520134, 20: 0.999999995750677}, 0, 5, 0.987842560520134},
			{"a=40, mean 30", 40, 1, 30, map[int]float64{0: 1.8987948824153e-10, 5: 3.9756148733766e-6, 20: 0.085746212626797, 30: 0.550259587849506, 45: 0.976078321350239, 60: 0.999802857893674}, 17, 45, 0},
		} {
			t.Run(c.name, func(t *testing.T) {
				cal := calibrationAt(c.rate, c.a)
				cdf := cal.countCDF(c.d)
				for k, want := range c.cdf {
					if got := cdf(k); !scalar.EqualWithinAbsOrRel(got, want, 1e-13, 1e-10) {
						t.Errorf("P(N ≤ %d) = %.15g, mpmath %.15g", k, got, want)
					}
				}
				p := cal.Predict(c.d)
				if p.Low != c.low || p.High != c.high {
					t.Errorf("interval [%d, %d], mpmath's quantiles [%d, %d]", p.Low, p.High, c.low, c.high)
				}
				if p.LowPerDay != float64(c.low)/c.d || p.HighPerDay != float64(c.high)/c.d {
					t.Errorf("per day [%g, %g], want [%g, %g]", p.LowPerDay, p.HighPerDay, float64(c.low)/c.d, float64(c.high)/c.d)
				}
				if !scalar.EqualWithinAbsOrRel(p.Expected, c.rate*c.d, 1e-12, 1e-12) {
					t.Errorf("expected %g, want %g", p.Expected, c.rate*c.d)
				}
				if p.Coverage < PredictLevel || (c.coverageMin > 0 && !scalar.EqualWithinAbsOrRel(p.Coverage, c.coverageMin, 1e-12, 1e-10)) {
					t.Errorf("coverage %.15g, want %.15g (≥ %v)", p.Coverage, c.coverageMin, PredictLevel)
				}
			})
		}
	})
	t.Run("geometric", func(t *testing.T) {
		// a = 1, rate 0.25 over 7 days: mean 1.75, q = 1/2.75. The 97.5 %
		// quantile is the smallest k with (1−q)^(k+1) ≤ 0.025: k + 1 ≥
		// ln 0.025 / ln(1.75/2.75) = 8.16, k = 8; the 2.5 % one is 0.
		cal := calibrationAt(0.25, 1)
		q := 1 / 2.75
		cdf := cal.countCDF(7)
		for k := 0; k <= 12; k++ {
			want := 1 - math.Pow(1-q, float64(k+1))
			if got := cdf(k); !scalar.EqualWithinAbsOrRel(got, want, 1e-13, 1e-12) {
				t.Errorf("P(N ≤ %d) = %.15g, closed form %.15g", k, got, want)
			}
		}
		if p := cal.Predict(7); p.Low != 0 || p.High != 8 {
			t.Errorf("interval [%d, %d], want [0, 8]", p.Low, p.High)
		}
	})
	t.Run("binomial identity", func(t *testing.T) {
		for _, a := range []float64{2, 3, 7} {
			cal := calibrationAt(0.5, a)
			const d = 4.0
			q := a / (a + 0.5*d)
			cdf := cal.countCDF(d)
			for k := 0; k <= 15; k++ {
				want := distuv.Binomial{N: float64(k) + a, P: q}.Survival(a - 1)
				if got := cdf(k); !scalar.EqualWithinAbsOrRel(got, want, 1e-12, 1e-10) {
					t.Errorf("a=%v: P(N ≤ %d) = %.15g, binomial %.15g", a, k, got, want)
				}
			}
		}
	})
	t.Run("mixture", func(t *testing.T) {
		for _, c := range []struct{ rate, a, d float64 }{{0.25, 0.8, 5}, {0.11, 1.7, 7}, {2, 12, 3}} {
			cal := calibrationAt(c.rate, c.a)
			g := distuv.Gamma{Alpha: c.a, Beta: c.a / c.rate}
			cdf := cal.countCDF(c.d)
			for k := 0; k <= 8; k++ {
				want := quad.Fixed(func(u float64) float64 {
					return distuv.Poisson{Lambda: c.d * g.Quantile(u)}.CDF(float64(k))
				}, 0, 1, 2000, nil, 0)
				if got := cdf(k); math.Abs(got-want) > 1e-6 {
					t.Errorf("rate %v, a %v, %v days: P(N ≤ %d) = %.6f, quadrature of the mixture %.6f", c.rate, c.a, c.d, k, got, want)
				}
			}
		}
	})
	t.Run("poisson", func(t *testing.T) {
		for _, cal := range []Calibration{{Rate: 0.25}, {Rate: 0.25, RateSE: 1e-9}} {
			p := cal.Predict(5)
			if p.Low != 0 || p.High != 4 {
				t.Errorf("SE %g: interval [%d, %d], want [0, 4]", cal.RateSE, p.Low, p.High)
			}
			if !scalar.EqualWithinAbsOrRel(p.Coverage, 0.9909, 1e-4, 1e-4) {
				t.Errorf("SE %g: coverage %.5f, want 0.9909", cal.RateSE, p.Coverage)
			}
		}
	})
}

// TestPredictEdges: a rate of zero predicts no alert with certainty; an
// invalid horizon or rate gives NaN, never a panic; the interval widens
// with the rate's uncertainty and with the horizon (derived checks).
func TestPredictEdges(t *testing.T) {
	if p := (Calibration{}).Predict(7); p.Low != 0 || p.High != 0 || p.Coverage != 1 {
		t.Errorf("rate 0: %+v, want [0, 0] with coverage 1", p)
	}
	for _, c := range []struct {
		cal  Calibration
		days float64
	}{{Calibration{Rate: 0.25}, 0}, {Calibration{Rate: 0.25}, math.NaN()}, {Calibration{Rate: math.NaN()}, 7}, {Calibration{Rate: math.Inf(1)}, 7}, {Calibration{Rate: 0.25, RateSE: math.NaN()}, 7}} {
		if p := c.cal.Predict(c.days); !math.IsNaN(p.Coverage) || !math.IsNaN(p.Expected) {
			t.Errorf("%+v over %v days: %+v, want NaN", c.cal, c.days, p)
		}
	}
	narrow := Calibration{Rate: 1, RateSE: 0.1}.Predict(30)
	wide := Calibration{Rate: 1, RateSE: 0.5}.Predict(30)
	if !(wide.Low < narrow.Low && wide.High > narrow.High) {
		t.Errorf("SE 0.5: [%d, %d], SE 0.1: [%d, %d]: want the first wider on both sides", wide.Low, wide.High, narrow.Low, narrow.High)
	}
	// The budget's upper limit, 1440 a day, over a week: the search ends.
	if p := (Calibration{Rate: 1440, RateSE: 100}).Predict(7); !(p.Low < 10080 && p.High > 10080) {
		t.Errorf("1440 a day over a week: [%d, %d]", p.Low, p.High)
	}
}

// coverage tallies where counts fall against predictive intervals: the
// share inside [Low, High], below and above, beside the shares the
// intervals state (the mean of their own probabilities).
type coverage struct {
	n, in, below, above                     int
	stated, statedBelow, statedAbove, count float64
	expected                                float64
}

// add records count k against calibration c's interval over days.
func (v *coverage) add(c Calibration, days float64, k int) {
	p := c.Predict(days)
	cdf := c.countCDF(days)
	v.n++
	v.count += float64(k)
	v.expected += p.Expected
	v.stated += p.Coverage
	v.statedBelow += cdf(p.Low - 1)
	v.statedAbove += 1 - cdf(p.High)
	switch {
	case k < p.Low:
		v.below++
	case k > p.High:
		v.above++
	default:
		v.in++
	}
}

// check fails t unless the shares inside, below and above match the
// stated ones within three binomial standard errors plus slack.
func (v *coverage) check(t *testing.T, slack float64) {
	t.Helper()
	n := float64(v.n)
	for _, c := range []struct {
		name      string
		got, want float64
	}{{"inside", float64(v.in) / n, v.stated / n}, {"below", float64(v.below) / n, v.statedBelow / n}, {"above", float64(v.above) / n, v.statedAbove / n}} {
		if se := math.Sqrt(c.want * (1 - c.want) / n); math.Abs(c.got-c.want) > 3*se+slack {
			t.Errorf("%s: %.3f of %d repeats, stated %.3f (three binomial standard errors %.3f, slack %v)", c.name, c.got, v.n, c.want, 3*se, slack)
		}
	}
}

func (v *coverage) String() string {
	n := float64(v.n)
	return fmt.Sprintf("%d repeats: inside %.3f (stated %.3f), below %.3f (stated %.3f), above %.3f (stated %.3f); counted %.0f, expected %.1f",
		v.n, float64(v.in)/n, v.stated/n, float64(v.below)/n, v.statedBelow/n, float64(v.above)/n, v.statedAbove/n, v.count, v.expected)
}

// TestPredictCoverage: the predictive interval's coverage over many
// seeded repeats, against the probability each interval states (at least
// 95 %, a count being discrete), within three binomial standard errors
// plus a slack of 0.01 for the gamma's approximation of the rate's
// sampling distribution, inside and in each tail. Derived checks
// (simulations of the method against its own statement; seeded).
//
//   - rate from a count: the rate is estimated from k ~ Poisson(λT)
//     alerts over T = 80 days at λ = 0.25 a day (Rate = k/T, RateSE =
//     √k/T, the usual unbiased estimate and its standard error), and the
//     interval for the next 40 days is checked against N ~ Poisson(40λ).
//     Here the rate's error is what Predict assumes (no bias, the stated
//     spread). In this run the interval held 0.962 against 0.965 stated;
//     the Poisson of the estimated rate alone, which ignores the rate's
//     error, held 0.915 against 0.967 and must fall short by more than
//     0.03. (With T = 20 and 20 days, a mean of 5 alerts to estimate
//     from, the gamma held 0.950 against 0.975: the approximation is
//     coarser with fewer alerts behind the rate.)
//   - the whole calibration: each repeat calibrates a statistic whose
//     block maxima are exactly Gumbel (gumbelRatios, one frame every 15
//     minutes, the rule 1 of 1) to a budget of 0.25 a day on 160
//     held-out days (200 block maxima of 19.2 h), as fit does, and counts
//     the alerts the rule opens at that scale over the next 7 days of the
//     same process. The rate's interval, read as an interval for the
//     measured rate, holds it in under a third of the repeats (the
//     comparison the suite used to make). In this run the interval held
//     0.997 against 0.989 stated, 556 alerts counted against 521.7
//     expected (with the GEV's rate, one alert per block, it held 0.977
//     against 0.985 and the rate was about a tenth low). The stated rate's own
//     coverage from a few held-out days is TestStatedRateCoverage's.
func TestPredictCoverage(t *testing.T) {
	if testing.Short() {
		t.Skip("long run")
	}
	const days = 7
	t.Run("rate from a count", func(t *testing.T) {
		const lambda, span, horizon, repeats = 0.25, 80.0, 40.0, 20000
		rng := rand.New(rand.NewPCG(13, 7))
		var v, plug coverage
		for range repeats {
			k := distuv.Poisson{Lambda: lambda * span, Src: rng}.Rand()
			n := int(distuv.Poisson{Lambda: lambda * horizon, Src: rng}.Rand())
			c := Calibration{Rate: k / span, RateSE: math.Sqrt(k) / span}
			v.add(c, horizon, n)
			plug.add(Calibration{Rate: c.Rate}, horizon, n)
		}
		t.Logf("predictive: %v", &v)
		t.Logf("Poisson of the estimated rate alone: %v", &plug)
		v.check(t, 0.01)
		if short := plug.stated/float64(plug.n) - float64(plug.in)/float64(plug.n); short < 0.03 {
			t.Errorf("the Poisson of the estimated rate alone held %.3f against %.3f stated: expected it to fall short by 0.03",
				float64(plug.in)/float64(plug.n), plug.stated/float64(plug.n))
		}
	})
	t.Run("whole calibration", func(t *testing.T) {
		const (
			repeats = 300
			period  = 15 * time.Minute
			heldOut = 160 * 24 * 4
			budget  = 0.25
		)
		rule := alerts.AlarmRule{N: 1, M: 1}
		rng := rand.New(rand.NewPCG(2026, 13))
		var v coverage
		var rateIn, failed int
		t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
		for r := range repeats {
			ct, cr := gumbelRatios(rng, 1, t0, period, heldOut)
			cal, err := CalibrateBudget(ct, cr, budget, rule, 160)
			lt, lr := gumbelRatios(rng, 1, t0.Add(heldOut*period), period, days*24*4)
			if err != nil {
				// fit leaves such a unit at its α limits.
				failed++
				t.Logf("repeat %d: %v", r, err)
				continue
			}
			k := countAlerts(lt, lr, cal.Scale, rule)
			v.add(cal, days, k)
			if m := float64(k) / days; cal.RateLow <= m && m <= cal.RateHigh {
				rateIn++
			}
		}
		t.Logf("%v; the rate's interval holds the measured rate in %.3f", &v, float64(rateIn)/float64(v.n))
		if failed > repeats/50 {
			t.Errorf("%d of %d calibrations failed", failed, repeats)
		}
		v.check(t, 0.01)
		if s := float64(rateIn) / float64(v.n); s > 1./3 {
			t.Errorf("the rate's interval held the measured rate in %.3f of the repeats: expected it to fail as a test of a count", s)
		}
	})
}

// gumbelRatios returns n frames one period apart from start whose ratio
// (column 0; NaN elsewhere) is standard Gumbel (location 0, scale 1)
// shifted by loc, independent from frame to frame: the maximum of m
// frames is then exactly Gumbel, location loc + ln m (the Gumbel is
// max-stable; Coles 2001, §3.1.4), so the GEV of the calibration is the
// true model of its block maxima and only sampling error remains.
func gumbelRatios(rng *rand.Rand, loc float64, start time.Time, period time.Duration, n int) ([]time.Time, [][nStatistics]float64) {
	ts := make([]time.Time, n)
	rs := make([][nStatistics]float64, n)
	for k := range n {
		ts[k] = start.Add(time.Duration(k) * period)
		rs[k] = [nStatistics]float64{loc - math.Log(-math.Log(1-rng.Float64())), math.NaN(), math.NaN(), math.NaN(), math.NaN(), math.NaN()}
	}
	return ts, rs
}

// TestPredictOutOfRange: rates and standard errors a model file can carry
// (finite JSON numbers) but that no fit states never panic and never
// return an interval that does not hold its own expected count. A
// standard error so much larger than the rate that the gamma's shape
// (Rate/RateSE)² underflows to 0 is the shape's limit, all the count's
// mass at 0 (the negative binomial's P(N = 0) = q^a → 1 as a → 0, derived
// by hand); an infinite standard error, or an expected count beyond
// maxPredictCount, is out of range: NaN.
func TestPredictOutOfRange(t *testing.T) {
	for _, c := range []Calibration{{Rate: 1e-200, RateSE: 1}, {Rate: 1e6, RateSE: 1e167}} {
		if p := c.Predict(7); p.Low != 0 || p.High != 0 || p.Coverage != 1 {
			t.Errorf("%+v: shape underflowing: %+v, want [0, 0] with coverage 1", c, p)
		}
	}
	for _, c := range []Calibration{{Rate: 0.25, RateSE: math.Inf(1)}, {Rate: 1e300, RateSE: 1}, {Rate: 1e300}, {Rate: 1e12}} {
		if p := c.Predict(7); !math.IsNaN(p.Coverage) || !math.IsNaN(p.Expected) {
			t.Errorf("%+v: %+v, want NaN", c, p)
		}
	}
}
