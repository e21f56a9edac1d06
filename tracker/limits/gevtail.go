package limits

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"
)

// FitGEVUnbounded fits a GEV to the block maxima x by maximum likelihood
// under the constraint ξ ≥ 0: the fit for a statistic whose upper tail is
// known to be unbounded, so that its block maxima lie in the Gumbel
// (ξ = 0) or the Fréchet (ξ > 0) domain of attraction, never the Weibull
// one (ξ < 0, a finite upper end point).
//
// A squared Gaussian quantity (a χ²-type chart statistic) has an
// exponential tail and its maxima are in the Gumbel domain (Coles 2001,
// §3.1.5, the exponential example; Leadbetter, Lindgren & Rootzén 1983,
// Extremes and Related Properties of Random Sequences and Processes,
// ch. 3–4, for stationary Gaussian sequences, stated from memory); a
// spread that itself moves over the normal data (a mixture of variances)
// only makes the tail heavier. An unconstrained estimate ξ̂ < 0 from a few
// block maxima is then an artefact of the sample, and it puts every
// return level of small probability just above the largest maximum seen
// (the upper end point μ − σ/ξ lies close to it).
//
// The constrained maximum lies on the boundary when the unconstrained one
// lies outside it (the likelihood, profiled over μ and σ, is unimodal in
// ξ for the samples met here): FitGEV is kept when ξ̂ ≥ 0, else the
// Gumbel (ξ = 0) is fitted by maximum likelihood (FitGumbel).
func FitGEVUnbounded(x []float64) (GEVFit, error) {
	f, err := FitGEV(x)
	if err == nil && f.Xi >= 0 {
		return f, nil
	}
	if err != nil && f.Sigma > 0 && f.Xi >= 0 {
		return f, err // ξ̂ ≥ 0 without a covariance: as FitGEV
	}
	return FitGumbel(x)
}

// FitGumbel fits the Gumbel distribution (the GEV with ξ = 0) to the block
// maxima x by maximum likelihood (Coles 2001, §3.3.2 with ξ fixed):
// Nelder–Mead over (μ, log σ) from the moment estimates, then the
// observed information of (μ, σ) by central differences. Cov holds it in
// its first two rows and columns and zeros for ξ (held fixed). It needs
// at least 5 finite maxima with some spread.
func FitGumbel(x []float64) (GEVFit, error) {
	n := len(x)
	if n < 5 {
		return GEVFit{}, fmt.Errorf("%w: Gumbel fit needs at least 5 block maxima, got %d", ErrDomain, n)
	}
	mean, ss := 0.0, 0.0
	for _, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return GEVFit{}, fmt.Errorf("%w: Gumbel fit: non-finite maximum %v", ErrDomain, v)
		}
		mean += v / float64(n)
	}
	for _, v := range x {
		ss += (v - mean) * (v - mean)
	}
	sd := math.Sqrt(ss / float64(n-1))
	if !(sd > 0) {
		return GEVFit{}, fmt.Errorf("%w: Gumbel fit: the %d maxima are all equal", ErrDomain, n)
	}
	s0 := sd * math.Sqrt(6) / math.Pi
	x0 := []float64{mean - 0.5772156649*s0, math.Log(s0)}
	nll := func(v []float64) float64 {
		l := GEV{v[0], math.Exp(v[1]), 0}.LogLik(x)
		if math.IsInf(l, -1) || math.IsNaN(l) {
			return math.MaxFloat64 / 4
		}
		return -l
	}
	best, bestF := x0, nll(x0)
	for range 2 {
		res, err := optimize.Minimize(optimize.Problem{Func: nll}, best,
			&optimize.Settings{MajorIterations: 5000, Converger: &optimize.FunctionConverge{Absolute: 1e-12, Iterations: 200}},
			&optimize.NelderMead{})
		if err != nil && res == nil {
			return GEVFit{}, fmt.Errorf("limits: Gumbel fit: %w", err)
		}
		if res.F <= bestF {
			best, bestF = res.X, res.F
		}
	}
	g := GEV{best[0], math.Exp(best[1]), 0}
	fit := GEVFit{GEV: g, LogLik: -bestF, N: n}
	h := mat.NewSymDense(2, nil)
	fd.Hessian(h, func(v []float64) float64 {
		l := GEV{v[0], v[1], 0}.LogLik(x)
		if math.IsInf(l, -1) {
			return math.MaxFloat64 / 4
		}
		return -l
	}, []float64{g.Mu, g.Sigma}, &fd.Settings{Formula: fd.Central, Step: 1e-4 * g.Sigma})
	var ch mat.Cholesky
	if !ch.Factorize(h) {
		return fit, fmt.Errorf("%w: Gumbel fit: observed information not positive definite", ErrDomain)
	}
	var cov mat.SymDense
	if err := ch.InverseTo(&cov); err != nil {
		return fit, fmt.Errorf("limits: Gumbel fit: %w", err)
	}
	for i := 0; i < 2; i++ {
		for j := 0; j < 2; j++ {
			fit.Cov[i][j] = cov.At(i, j)
		}
	}
	return fit, nil
}
