package pipeline

import (
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

// TestPredictCoverage: the predictive interval's coverage over many
// seeded repeats of the whole calibration. Each repeat calibrates a
// statistic whose block maxima are exactly Gumbel (gumbelRatios, one frame
// every 5 minutes, the rule 1 of 1) to a budget of 0.25 a day on 40
// held-out days (50 block maxima of 19.2 h), as fit does, then counts the
// alerts the rule opens at that scale over the next 7 days of the same
// process. The share of repeats whose count lies inside Predict(7) must
// match the mean of the intervals' own stated coverage (each at least
// 95 %) within three binomial standard errors, and so must each tail
// (count below Low, above High) its stated probability. Derived check (a
// simulation of the method against its own statement; seeded). The rate's
// interval, read as an interval for the measured rate, holds it in under
// half of the repeats (asserted below 0.8): the comparison the suite used
// to make. On 4 held-out days (20 block maxima) the calibrated rate
// understates the true one (the README's budget section gives the
// figures), so the coverage falls short there; this test does not hide
// it, it checks the interval where the rate's estimate is close to right.
func TestPredictCoverage(t *testing.T) {
	if testing.Short() {
		t.Skip("long run")
	}
	const (
		repeats = 300
		period  = 5 * time.Minute
		heldOut = 40 * 24 * 12
		days    = 7
		budget  = 0.25
	)
	rule := alerts.AlarmRule{N: 1, M: 1}
	rng := rand.New(rand.NewPCG(2026, 13))
	var in, below, above, poissonIn, rateIn, n, failed int
	var stated, statedBelow, statedAbove, counted, expected float64
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	for r := range repeats {
		ct, cr := gumbelRatios(rng, 1, t0, period, heldOut)
		cal, err := CalibrateBudget(ct, cr, budget, rule, 4)
		if err != nil {
			// fit leaves such a unit at its α limits; the test days
			// of this repeat are still drawn.
			failed++
			t.Logf("repeat %d: %v", r, err)
		}
		lt, lr := gumbelRatios(rng, 1, t0.Add(heldOut*period), period, days*24*12)
		if err != nil {
			continue
		}
		k := countAlerts(lt, lr, cal.Scale, rule)
		p := cal.Predict(days)
		cdf := cal.countCDF(days)
		n++
		counted += float64(k)
		expected += p.Expected
		stated += p.Coverage
		statedBelow += cdf(p.Low - 1)
		statedAbove += 1 - cdf(p.High)
		switch {
		case k < p.Low:
			below++
		case k > p.High:
			above++
		default:
			in++
		}
		if pp := (Calibration{Rate: cal.Rate}).Predict(days); pp.Low <= k && k <= pp.High {
			poissonIn++
		}
		if m := float64(k) / days; cal.RateLow <= m && m <= cal.RateHigh {
			rateIn++
		}
	}
	if failed > repeats/50 {
		t.Errorf("%d of %d calibrations failed", failed, repeats)
	}
	share := func(c int) float64 { return float64(c) / float64(n) }
	t.Logf("%d repeats: predictive interval holds the count in %.3f (stated %.3f), below %.3f (stated %.3f), above %.3f (stated %.3f); Poisson of the rate alone %.3f; the rate's interval holds the measured rate in %.3f; alerts counted %.0f, expected %.1f",
		n, share(in), stated/float64(n), share(below), statedBelow/float64(n), share(above), statedAbove/float64(n), share(poissonIn), share(rateIn), counted, expected)
	if share(rateIn) > 0.8 {
		t.Errorf("the rate's interval held the measured rate in %.3f of the repeats: expected it to fail as a test of a count", share(rateIn))
	}
	for _, c := range []struct {
		name      string
		got, want float64
	}{{"inside", share(in), stated / float64(n)}, {"below", share(below), statedBelow / float64(n)}, {"above", share(above), statedAbove / float64(n)}} {
		if se := math.Sqrt(c.want * (1 - c.want) / float64(n)); math.Abs(c.got-c.want) > 3*se+0.5/float64(n) {
			t.Errorf("%s: %.3f of %d repeats, stated %.3f (three binomial standard errors %.3f)", c.name, c.got, n, c.want, 3*se)
		}
	}
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
