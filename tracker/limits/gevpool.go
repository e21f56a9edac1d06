package limits

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
)

// Bounds of the common shape searched by FitGEVCommonShape: wider than
// the shapes of block maxima of chart statistics (a bounded tail with ξ
// below −0.5 makes the likelihood irregular, Coles 2001 §3.3.2; above 1
// the mean is infinite).
const (
	poolXiLo = -0.5
	poolXiHi = 1.0
)

// FitGEVCommonShape fits one GEV to each sample of block maxima xs[u]
// with its own location μᵤ and scale σᵤ and one shape ξ common to all, by
// maximizing the summed log-likelihood
//
//	ℓ(μ₁, σ₁, …, μ_U, σ_U, ξ) = Σᵤ ℓᵤ(μᵤ, σᵤ, ξ)
//
// (Coles 2001, eqs. 3.7 and 3.9, per sample). The shape is the GEV's
// least identified parameter from a few dozen maxima (its standard error
// from 20 is about 0.2), and it drives the return levels of small
// probability; samples of one kind of quantity share it, as the sites of
// a homogeneous region do in regional frequency analysis (Hosking &
// Wallis 1997, Regional Frequency Analysis: An Approach Based on
// L-Moments, Cambridge University Press, ch. 1 and 6, which pool by
// L-moments; the joint likelihood is stated from memory as the usual
// likelihood form of the same idea).
//
// The profile log-likelihood of ξ (each μᵤ, σᵤ at their maximum for that
// ξ) is searched on a grid of step 0.1 over [−0.5, 1] and refined by
// golden section about the best grid point. Each returned fit has that
// ξ, its own μᵤ and σᵤ, its own log-likelihood and N, and the rows of
// (μᵤ, σᵤ, ξ) of the inverse observed information of all 2U + 1
// parameters together as its Cov, so that its return levels' standard
// errors carry the common shape's uncertainty. It needs every sample to
// satisfy FitGEVShape's conditions (5 finite maxima with some spread). It
// allocates (a per-calibration call).
func FitGEVCommonShape(xs [][]float64) ([]GEVFit, error) {
	if len(xs) == 0 {
		return nil, fmt.Errorf("%w: common-shape GEV fit of no sample", ErrDomain)
	}
	profile := func(xi float64) (float64, []GEVFit) {
		fits := make([]GEVFit, len(xs))
		l := 0.0
		for u, x := range xs {
			f, err := FitGEVShape(x, xi)
			if err != nil && f.Sigma == 0 {
				return math.Inf(-1), nil
			}
			fits[u] = f
			l += f.LogLik
		}
		return l, fits
	}
	for u, x := range xs {
		if len(x) < 5 {
			return nil, fmt.Errorf("%w: common-shape GEV fit: sample %d has %d block maxima, need at least 5", ErrDomain, u, len(x))
		}
	}
	const step = 0.1
	bestXi, bestL := math.NaN(), math.Inf(-1)
	for xi := poolXiLo; xi <= poolXiHi+1e-9; xi += step {
		if l, _ := profile(xi); l > bestL {
			bestXi, bestL = xi, l
		}
	}
	if math.IsNaN(bestXi) {
		return nil, fmt.Errorf("%w: common-shape GEV fit: no shape in [%v, %v] fits every sample", ErrDomain, poolXiLo, poolXiHi)
	}
	// Golden section on [best − step, best + step] (clamped).
	a, b := math.Max(bestXi-step, poolXiLo), math.Min(bestXi+step, poolXiHi)
	g := (math.Sqrt(5) - 1) / 2
	c, d := b-g*(b-a), a+g*(b-a)
	lc, _ := profile(c)
	ld, _ := profile(d)
	for b-a > 1e-4 {
		if lc >= ld {
			b, d, ld = d, c, lc
			c = b - g*(b-a)
			lc, _ = profile(c)
		} else {
			a, c, lc = c, d, ld
			d = a + g*(b-a)
			ld, _ = profile(d)
		}
	}
	xi := (a + b) / 2
	l, fits := profile(xi)
	if l < bestL {
		xi = bestXi
		l, fits = profile(xi)
	}
	if fits == nil {
		return nil, fmt.Errorf("%w: common-shape GEV fit failed at ξ = %.3g", ErrDomain, xi)
	}
	// Observed information of (μ₁, σ₁, …, μ_U, σ_U, ξ).
	U := len(xs)
	k := 2*U + 1
	v0 := make([]float64, k)
	for u, f := range fits {
		v0[2*u], v0[2*u+1] = f.Mu, f.Sigma
	}
	v0[k-1] = xi
	minSigma := math.Inf(1)
	for _, f := range fits {
		minSigma = math.Min(minSigma, f.Sigma)
	}
	h := mat.NewSymDense(k, nil)
	fd.Hessian(h, func(v []float64) float64 {
		s := 0.0
		for u, x := range xs {
			l := GEV{v[2*u], v[2*u+1], v[k-1]}.LogLik(x)
			if math.IsInf(l, -1) || math.IsNaN(l) {
				return math.MaxFloat64 / 4
			}
			s -= l
		}
		return s
	}, v0, &fd.Settings{Formula: fd.Central, Step: 1e-4 * minSigma})
	var ch mat.Cholesky
	if !ch.Factorize(h) {
		return fits, fmt.Errorf("%w: common-shape GEV fit: observed information not positive definite (ξ = %.3g)", ErrDomain, xi)
	}
	var cov mat.SymDense
	if err := ch.InverseTo(&cov); err != nil {
		return fits, fmt.Errorf("limits: common-shape GEV fit: %w", err)
	}
	for u := range fits {
		idx := [3]int{2 * u, 2*u + 1, k - 1}
		for i, a := range idx {
			for j, b := range idx {
				fits[u].Cov[i][j] = cov.At(a, b)
			}
		}
	}
	return fits, nil
}
