package limits

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/optimize"
)

// TestFitGEVCommonShapeOneSample: with one sample the common-shape fit is
// the ordinary maximum-likelihood fit, so it reproduces the worked example
// of Coles (2001), §3.4.1 (Port Pirie annual maximum sea levels; figures
// quoted from memory as in TestFitGEVPortPirie): (μ, σ, ξ) = (3.87, 0.198,
// −0.050), standard errors (0.028, 0.020, 0.098), log-likelihood 4.34.
func TestFitGEVCommonShapeOneSample(t *testing.T) {
	fits, err := FitGEVCommonShape([][]float64{portPirie(t)})
	if err != nil {
		t.Fatal(err)
	}
	f := fits[0]
	seMu, seSigma, seXi := f.SE()
	for _, c := range []struct {
		name           string
		got, want, tol float64
	}{
		{"μ", f.Mu, 3.87, 0.005}, {"σ", f.Sigma, 0.198, 0.0005}, {"ξ", f.Xi, -0.050, 0.0005},
		{"se μ", seMu, 0.028, 0.0005}, {"se σ", seSigma, 0.020, 0.0005}, {"se ξ", seXi, 0.098, 0.0005},
		{"log-likelihood", f.LogLik, 4.34, 0.005},
	} {
		if math.Abs(c.got-c.want) > c.tol {
			t.Errorf("%s = %.4f, Coles (2001) §3.4.1: %g (±%g)", c.name, c.got, c.want, c.tol)
		}
	}
}

// TestFitGEVCommonShapeAffine: the GEV is a location-scale family with
// the shape unchanged under z ↦ a + bz, so Port Pirie's maxima beside
// their copy 10 + 3z share Coles's shape −0.050 (§3.4.1) exactly; the copy
// has μ₂ = 10 + 3μ₁, σ₂ = 3σ₁ and log-likelihood ℓ₁ − n ln 3 (the
// Jacobian), and the two samples carry twice the information on ξ, so its
// standard error is 0.098/√2 = 0.069 (derived from the published 0.098).
func TestFitGEVCommonShapeAffine(t *testing.T) {
	x := portPirie(t)
	y := make([]float64, len(x))
	for i, v := range x {
		y[i] = 10 + 3*v
	}
	fits, err := FitGEVCommonShape([][]float64{x, y})
	if err != nil {
		t.Fatal(err)
	}
	a, b := fits[0], fits[1]
	_, _, seXi := b.SE()
	for _, c := range []struct {
		name           string
		got, want, tol float64
	}{
		{"ξ", a.Xi, -0.050, 0.0005},
		{"ξ of the copy", b.Xi, a.Xi, 0},
		{"μ of the copy", b.Mu, 10 + 3*a.Mu, 3e-4},
		{"σ of the copy", b.Sigma, 3 * a.Sigma, 3e-4},
		{"log-likelihood of the copy", b.LogLik, a.LogLik - float64(len(x))*math.Log(3), 1e-3},
		{"se ξ", seXi, 0.098 / math.Sqrt2, 0.001},
	} {
		if math.Abs(c.got-c.want) > c.tol {
			t.Errorf("%s = %.5f, want %.5f (±%g)", c.name, c.got, c.want, c.tol)
		}
	}
}

// gevSample draws n maxima from g by inversion of its CDF.
func gevSample(rng *rand.Rand, g GEV, n int) []float64 {
	x := make([]float64, n)
	for i := range x {
		y := -math.Log(1 - rng.Float64())
		if g.Xi == 0 {
			x[i] = g.Mu - g.Sigma*math.Log(y)
		} else {
			x[i] = g.Mu + g.Sigma/g.Xi*(math.Pow(y, -g.Xi)-1)
		}
	}
	return x
}

// TestFitGEVCommonShapeJointMaximum: the profile search finds the maximum
// of the joint likelihood: a direct Nelder–Mead over all 2U + 1
// parameters (gonum's optimizer, started from the profile's answer moved
// off it) reaches no higher log-likelihood.
func TestFitGEVCommonShapeJointMaximum(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	xs := [][]float64{
		gevSample(rng, GEV{1, 0.2, 0.3}, 20),
		gevSample(rng, GEV{2, 0.5, 0.1}, 25),
		gevSample(rng, GEV{0.8, 0.1, -0.1}, 20),
	}
	fits, err := FitGEVCommonShape(xs)
	if err != nil {
		t.Fatal(err)
	}
	got := 0.0
	for _, f := range fits {
		got += f.LogLik
	}
	nll := func(v []float64) float64 {
		l := 0.0
		for u, x := range xs {
			l += GEV{v[2*u], math.Exp(v[2*u+1]), v[6]}.LogLik(x)
		}
		if math.IsInf(l, -1) || math.IsNaN(l) {
			return math.MaxFloat64 / 4
		}
		return -l
	}
	v := make([]float64, 7)
	for u, f := range fits {
		v[2*u], v[2*u+1] = f.Mu+0.05*f.Sigma, math.Log(f.Sigma)+0.1
	}
	v[6] = fits[0].Xi - 0.05
	best := math.Inf(1)
	for range 4 {
		res, err := optimize.Minimize(optimize.Problem{Func: nll}, v, &optimize.Settings{MajorIterations: 20000,
			Converger: &optimize.FunctionConverge{Absolute: 1e-12, Iterations: 500}}, &optimize.NelderMead{})
		if err != nil && res == nil {
			t.Fatal(err)
		}
		v, best = res.X, math.Min(best, res.F)
	}
	if -best > got+1e-6 {
		t.Errorf("joint Nelder–Mead reached log-likelihood %.6f above the profile's %.6f (ξ %.4f against %.4f)", -best, got, v[6], fits[0].Xi)
	}
	if math.Abs(-best-got) > 1e-3 {
		t.Errorf("joint optimum %.6f, profile %.6f: not the same maximum", -best, got)
	}
}

// TestFitGEVCommonShapeError: samples that share a shape give a pooled
// estimate of it with a smaller error than each sample's own fit (four
// samples of 20 maxima, ξ = 0.2, different locations and scales; 15
// 15 seeded repetitions): the point of pooling a badly identified parameter.
func TestFitGEVCommonShapeError(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	const xi, reps = 0.2, 15
	var seOwn, sePool float64
	n := 0
	for range reps {
		gs := []GEV{{0.8, 0.15, xi}, {1.0, 0.2, xi}, {0.7, 0.1, xi}, {1.2, 0.3, xi}}
		var xs [][]float64
		for _, g := range gs {
			xs = append(xs, gevSample(rng, g, 20))
		}
		fits, err := FitGEVCommonShape(xs)
		if err != nil {
			t.Fatal(err)
		}
		sePool += (fits[0].Xi - xi) * (fits[0].Xi - xi) * float64(len(xs))
		for _, x := range xs {
			f, err := FitGEV(x)
			if err != nil && !(f.Sigma > 0) {
				t.Fatal(err)
			}
			seOwn += (f.Xi - xi) * (f.Xi - xi)
			n++
		}
	}
	rmsOwn, rmsPool := math.Sqrt(seOwn/float64(n)), math.Sqrt(sePool/float64(n))
	t.Logf("root mean square error of ξ̂: own %.3f, common %.3f", rmsOwn, rmsPool)
	if !(rmsPool < 0.65*rmsOwn) {
		t.Errorf("common shape's error %.3f not well below the own fits' %.3f", rmsPool, rmsOwn)
	}
}

// TestFitGEVCommonShapeRefuses: no sample, or one too short, is an error.
func TestFitGEVCommonShapeRefuses(t *testing.T) {
	if _, err := FitGEVCommonShape(nil); err == nil {
		t.Error("no sample: no error")
	}
	if _, err := FitGEVCommonShape([][]float64{{1, 2, 3, 4, 5, 6}, {1, 2}}); err == nil {
		t.Error("a sample of 2 maxima: no error")
	}
}
