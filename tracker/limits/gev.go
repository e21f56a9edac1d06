package limits

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"
)

// GEV is the generalized extreme value distribution of block maxima
// (Coles 2001, An Introduction to Statistical Modeling of Extreme Values,
// §3.1.3), location Mu, scale Sigma > 0, shape Xi:
//
//	G(z) = exp{−[1 + ξ(z − μ)/σ]^(−1/ξ)}   on 1 + ξ(z − μ)/σ > 0
//	G(z) = exp{−exp[−(z − μ)/σ]}          for ξ = 0 (Gumbel)
type GEV struct{ Mu, Sigma, Xi float64 }

// gumbelXi is |ξ| below which the Gumbel limit is used (the ξ → 0 forms
// agree to O(ξ) there).
const gumbelXi = 1e-7

// CDF returns G(z).
func (g GEV) CDF(z float64) float64 {
	y := (z - g.Mu) / g.Sigma
	if math.Abs(g.Xi) < gumbelXi {
		return math.Exp(-math.Exp(-y))
	}
	b := 1 + g.Xi*y
	if b <= 0 {
		if g.Xi > 0 {
			return 0
		}
		return 1
	}
	return math.Exp(-math.Pow(b, -1/g.Xi))
}

// Exceed returns the probability 1 − G(z) that a block maximum exceeds z,
// computed without cancellation for small values.
func (g GEV) Exceed(z float64) float64 {
	y := (z - g.Mu) / g.Sigma
	var t float64
	if math.Abs(g.Xi) < gumbelXi {
		t = math.Exp(-y)
	} else {
		b := 1 + g.Xi*y
		if b <= 0 {
			if g.Xi > 0 {
				return 1
			}
			return 0
		}
		t = math.Pow(b, -1/g.Xi)
	}
	return -math.Expm1(-t)
}

// ReturnLevel returns z_p, the level exceeded by a block maximum with
// probability p (the 1/p-block return level; Coles 2001, eq. 3.10):
//
//	z_p = μ − (σ/ξ)[1 − y_p^(−ξ)],  y_p = −log(1 − p)
func (g GEV) ReturnLevel(p float64) float64 {
	yp := -math.Log1p(-p)
	if math.Abs(g.Xi) < gumbelXi {
		return g.Mu - g.Sigma*math.Log(yp)
	}
	return g.Mu - g.Sigma/g.Xi*(1-math.Pow(yp, -g.Xi))
}

// LogLik returns the GEV log-likelihood of the sample x (Coles 2001,
// eqs. 3.7 and 3.9), −Inf outside the support or for σ ≤ 0.
func (g GEV) LogLik(x []float64) float64 {
	if !(g.Sigma > 0) {
		return math.Inf(-1)
	}
	m := float64(len(x))
	l := -m * math.Log(g.Sigma)
	if math.Abs(g.Xi) < gumbelXi {
		for _, z := range x {
			y := (z - g.Mu) / g.Sigma
			l -= y + math.Exp(-y)
		}
		return l
	}
	for _, z := range x {
		b := 1 + g.Xi*(z-g.Mu)/g.Sigma
		if b <= 0 {
			return math.Inf(-1)
		}
		lb := math.Log(b)
		l -= (1+1/g.Xi)*lb + math.Exp(-lb/g.Xi)
	}
	return l
}

// GEVFit is a maximum-likelihood GEV fit with its approximate covariance.
type GEVFit struct {
	GEV
	// Cov is the inverse observed information of (μ, σ, ξ) at the
	// estimate (Coles 2001, §2.6.4): the usual approximate covariance.
	Cov    [3][3]float64
	LogLik float64 // maximized log-likelihood
	N      int     // number of block maxima
}

// SE returns the standard errors of (μ, σ, ξ).
func (f GEVFit) SE() (mu, sigma, xi float64) {
	return math.Sqrt(f.Cov[0][0]), math.Sqrt(f.Cov[1][1]), math.Sqrt(f.Cov[2][2])
}

// ReturnLevelSE returns z_p and its standard error by the delta method
// (Coles 2001, eq. 3.11): Var(z_p) ≈ ∇z_pᵀ V ∇z_p.
func (f GEVFit) ReturnLevelSE(p float64) (z, se float64) {
	z = f.ReturnLevel(p)
	grad := f.gradient(func(g GEV) float64 { return g.ReturnLevel(p) })
	return z, math.Sqrt(f.quad(grad))
}

// ExceedSE returns 1 − G(z) and its standard error by the delta method.
func (f GEVFit) ExceedSE(z float64) (p, se float64) {
	p = f.Exceed(z)
	grad := f.gradient(func(g GEV) float64 { return g.Exceed(z) })
	return p, math.Sqrt(f.quad(grad))
}

func (f GEVFit) gradient(h func(GEV) float64) [3]float64 {
	var g [3]float64
	x := []float64{f.Mu, f.Sigma, f.Xi}
	dst := make([]float64, 3)
	fd.Gradient(dst, func(v []float64) float64 { return h(GEV{v[0], v[1], v[2]}) }, x,
		&fd.Settings{Formula: fd.Central, Step: 1e-6 * math.Max(f.Sigma, 1e-12)})
	copy(g[:], dst)
	return g
}

func (f GEVFit) quad(g [3]float64) float64 {
	s := 0.0
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			s += g[i] * f.Cov[i][j] * g[j]
		}
	}
	return math.Max(s, 0)
}

// FitGEV fits a GEV to the block maxima x by maximum likelihood (Coles
// 2001, §3.3.2): Nelder–Mead over (μ, log σ, ξ) from the Gumbel moment
// estimates, then the observed information by central differences for
// Cov. It needs at least 5 finite maxima with some spread. It allocates
// (a per-calibration call, not a per-frame one).
func FitGEV(x []float64) (GEVFit, error) { return fitML(x, true, 0) }

// fitML is the maximum-likelihood fit of FitGEV (free shape) and, with
// free false, of FitGumbel and FitGEVShape (ξ held at xi0): the
// parameters are (μ, log σ) and, free, ξ; the observed information is
// taken in (μ, σ[, ξ]) and its inverse fills Cov (the row and column of a
// fixed ξ stay 0).
func fitML(x []float64, free bool, xi0 float64) (GEVFit, error) {
	name, k := "Gumbel fit", 2
	if free {
		name, k = "GEV fit", 3
	} else if xi0 != 0 {
		name = "GEV fit at a fixed shape"
	}
	n := len(x)
	if n < 5 {
		return GEVFit{}, fmt.Errorf("%w: %s needs at least 5 block maxima, got %d", ErrDomain, name, n)
	}
	mean, ss := 0.0, 0.0
	for _, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return GEVFit{}, fmt.Errorf("%w: %s: non-finite maximum %v", ErrDomain, name, v)
		}
		mean += v / float64(n)
	}
	for _, v := range x {
		ss += (v - mean) * (v - mean)
	}
	sd := math.Sqrt(ss / float64(n-1))
	if !(sd > 0) {
		return GEVFit{}, fmt.Errorf("%w: %s: the %d maxima are all equal", ErrDomain, name, n)
	}
	xi := func(v []float64) float64 {
		if free {
			return v[2]
		}
		return xi0
	}
	s0 := sd * math.Sqrt(6) / math.Pi
	x0 := []float64{mean - 0.5772156649*s0, math.Log(s0), 0.1}[:k]
	if !free && xi0 != 0 {
		// Start inside the support 1 + ξ(z − μ)/σ > 0 of every maximum.
		lo, hi := slices.Min(x), slices.Max(x)
		if xi0 > 0 {
			x0[0] = math.Min(x0[0], lo+0.9*s0/xi0)
		} else {
			x0[0] = math.Max(x0[0], hi+0.9*s0/xi0)
		}
	}
	nll := func(v []float64) float64 {
		l := GEV{v[0], math.Exp(v[1]), xi(v)}.LogLik(x)
		if math.IsInf(l, -1) || math.IsNaN(l) {
			return math.MaxFloat64 / 4
		}
		return -l
	}
	best := x0
	bestF := nll(x0)
	// Two restarts of Nelder–Mead from the previous optimum: the simplex
	// can stall on the support boundary of the first start.
	for range 3 {
		res, err := optimize.Minimize(optimize.Problem{Func: nll}, best,
			&optimize.Settings{MajorIterations: 5000, Converger: &optimize.FunctionConverge{Absolute: 1e-12, Iterations: 200}},
			&optimize.NelderMead{})
		if err != nil && res == nil {
			return GEVFit{}, fmt.Errorf("limits: %s: %w", name, err)
		}
		if res.F <= bestF {
			best, bestF = res.X, res.F
		}
	}
	g := GEV{best[0], math.Exp(best[1]), xi(best)}
	fit := GEVFit{GEV: g, LogLik: -bestF, N: n}
	// Observed information in (μ, σ[, ξ]).
	h := mat.NewSymDense(k, nil)
	fd.Hessian(h, func(v []float64) float64 {
		l := GEV{v[0], v[1], xi(v)}.LogLik(x)
		if math.IsInf(l, -1) {
			return math.MaxFloat64 / 4
		}
		return -l
	}, []float64{g.Mu, g.Sigma, g.Xi}[:k], &fd.Settings{Formula: fd.Central, Step: 1e-4 * g.Sigma})
	var ch mat.Cholesky
	if !ch.Factorize(h) {
		if free {
			return fit, fmt.Errorf("%w: %s: observed information not positive definite (ξ = %.3g)", ErrDomain, name, g.Xi)
		}
		return fit, fmt.Errorf("%w: %s: observed information not positive definite", ErrDomain, name)
	}
	var cov mat.SymDense
	if err := ch.InverseTo(&cov); err != nil {
		return fit, fmt.Errorf("limits: %s: %w", name, err)
	}
	for i := 0; i < k; i++ {
		for j := 0; j < k; j++ {
			fit.Cov[i][j] = cov.At(i, j)
		}
	}
	return fit, nil
}
