// Package limits computes control limits for the monitoring statistics of
// modewatch: Hotelling's T², the squared prediction error (SPE, Q), the
// combined index φ of Yue & Qin (2001), per-channel reconstruction-based
// contributions (RBC, Alcalá & Qin 2009), and empirical limits from a
// reference log of normal operation.
//
// All quantiles are lower-tail quantiles at 1 − α, where α is the false-alarm
// probability (the upper-tail area). They come from gonum's stat/distuv, which
// handles non-integer degrees of freedom (needed by Box's approximation).
//
// Every function here is pure and allocation-free except the empirical ones,
// which take a caller-owned scratch slice.
package limits

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/stat/distuv"
)

// ErrDomain reports an argument outside the domain of a limit formula.
var ErrDomain = errors.New("limits: argument out of domain")

func checkAlpha(alpha float64) error {
	if !(alpha > 0 && alpha < 1) {
		return fmt.Errorf("%w: false-alarm rate α = %v not in (0, 1)", ErrDomain, alpha)
	}
	return nil
}

// ChiSquare returns the lower-tail quantile χ²_p(ν) of the chi-squared
// distribution with ν > 0 degrees of freedom (ν need not be an integer):
//
//	P(X ≤ χ²_p(ν)) = p.
func ChiSquare(p, nu float64) float64 {
	if !validDOF(nu) {
		return math.NaN()
	}
	return distuv.ChiSquared{K: nu}.Quantile(p)
}

// validDOF reports whether ν is a usable degree-of-freedom or shape
// parameter: positive and finite. The quantile functions return NaN for any
// other ν instead of handing it to distuv, whose root search does not end on
// a NaN parameter.
func validDOF(nu float64) bool { return nu > 0 && !math.IsInf(nu, 1) }

// F returns the lower-tail quantile F_p(ν₁, ν₂) of Snedecor's F distribution.
// The textbook "F_α(ν₁, ν₂)" upper critical value is F(1−α, ν₁, ν₂).
func F(p, nu1, nu2 float64) float64 {
	if !validDOF(nu1) || !validDOF(nu2) {
		return math.NaN()
	}
	return distuv.F{D1: nu1, D2: nu2}.Quantile(p)
}

// Normal returns the standard normal lower-tail quantile z_p.
func Normal(p float64) float64 {
	return distuv.UnitNormal.Quantile(p)
}

// StudentT returns the lower-tail quantile t_p(ν) of Student's t.
func StudentT(p, nu float64) float64 {
	if !validDOF(nu) {
		return math.NaN()
	}
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: nu}.Quantile(p)
}

// Beta returns the lower-tail quantile B_p(a, b) of the beta distribution.
func Beta(p, a, b float64) float64 {
	if !validDOF(a) || !validDOF(b) {
		return math.NaN()
	}
	return distuv.Beta{Alpha: a, Beta: b}.Quantile(p)
}

// T2ChiSquare is the large-sample (parameters known) T² limit on l retained
// dimensions (Montgomery, Introduction to Statistical Quality Control, ch. 11):
//
//	UCL = χ²_{1−α}(l)
func T2ChiSquare(alpha float64, l int) (float64, error) {
	if err := checkAlpha(alpha); err != nil {
		return 0, err
	}
	if l < 1 {
		return 0, fmt.Errorf("%w: T² dimension l = %d < 1", ErrDomain, l)
	}
	return ChiSquare(1-alpha, float64(l)), nil
}

// T2PhaseII is the T² limit for a new individual observation when mean and
// covariance were estimated from n earlier observations (NIST/SEMATECH
// e-Handbook 6.5.4.3.4; Ryan 2000, ch. 9), on l dimensions:
//
//	UCL = l(n+1)(n−1) / (n² − n·l) · F_{1−α}(l, n − l)
//
// n may be non-integer (an effective sample size); it must exceed l.
func T2PhaseII(alpha float64, l int, n float64) (float64, error) {
	if err := checkAlpha(alpha); err != nil {
		return 0, err
	}
	fl := float64(l)
	if l < 1 || !(n > fl) || math.IsInf(n, 0) {
		return 0, fmt.Errorf("%w: T² Phase II needs n > l ≥ 1 (n = %v, l = %d)", ErrDomain, n, l)
	}
	c := fl * (n + 1) * (n - 1) / (n*n - n*fl)
	return c * F(1-alpha, fl, n-fl), nil
}

// T2PhaseI is the T² limit for individual observations that took part in
// estimating the mean and covariance from m observations (Tracy, Young &
// Mason 1992, J. Quality Technology 24:88–95), one-sided at α:
//
//	UCL = ((m−1)²/m) · B_{1−α}(l/2, (m−l−1)/2)
func T2PhaseI(alpha float64, l int, m float64) (float64, error) {
	if err := checkAlpha(alpha); err != nil {
		return 0, err
	}
	fl := float64(l)
	if l < 1 || !(m > fl+1) {
		return 0, fmt.Errorf("%w: T² Phase I needs m > l+1 (m = %v, l = %d)", ErrDomain, m, l)
	}
	return (m - 1) * (m - 1) / m * Beta(1-alpha, fl/2, (m-fl-1)/2), nil
}

// Theta holds the traces θᵢ = tr(Rⁱ) of a residual covariance R; with the
// residual eigenvalues λⱼ, θᵢ = Σⱼ λⱼⁱ (Jackson & Mudholkar 1979).
type Theta struct {
	T1, T2, T3 float64
}

// ThetaFromEigen fills θ from residual eigenvalues (the reference form).
func ThetaFromEigen(lambda []float64) Theta {
	var th Theta
	for _, l := range lambda {
		th.T1 += l
		th.T2 += l * l
		th.T3 += l * l * l
	}
	return th
}

// BoxParams returns Box's (1954) moment-matching parameters for a Gaussian
// quadratic form Q with E[Q] = θ₁ and Var[Q] = 2θ₂:
//
//	g = θ₂/θ₁,  h = θ₁²/θ₂,  so  Q ≈ g·χ²(h).
func BoxParams(th Theta) (g, h float64) {
	return th.T2 / th.T1, th.T1 * th.T1 / th.T2
}

// BoxMoments returns Box's parameters from the sample mean m and variance v
// of reference SPE values (Nomikos & MacGregor 1995): g = v/(2m), h = 2m²/v.
func BoxMoments(m, v float64) (g, h float64) {
	return v / (2 * m), 2 * m * m / v
}

// finiteLimit returns lim, or an ErrDomain error naming the statistic when
// lim is not a positive finite number (degenerate traces, underflow).
func finiteLimit(name string, lim float64) (float64, error) {
	if !(lim > 0) || math.IsInf(lim, 1) {
		return 0, fmt.Errorf("%w: %s limit %v is not a positive finite number", ErrDomain, name, lim)
	}
	return lim, nil
}

func checkTheta(th Theta, needT3 bool) error {
	if !(th.T1 > 0 && th.T2 > 0) || math.IsInf(th.T1, 0) || math.IsInf(th.T2, 0) {
		return fmt.Errorf("%w: residual traces θ₁ = %v, θ₂ = %v must be positive and finite", ErrDomain, th.T1, th.T2)
	}
	if needT3 && !(th.T3 > 0) {
		return fmt.Errorf("%w: residual trace θ₃ = %v must be positive", ErrDomain, th.T3)
	}
	return nil
}

// SPEBox is the SPE limit by Box's (1954) approximation, as used for PCA
// residuals by Nomikos & MacGregor (1995):
//
//	Q_α = g · χ²_{1−α}(h),  g = θ₂/θ₁,  h = θ₁²/θ₂  (h usually non-integer)
//
// It is exact when all residual eigenvalues are equal.
func SPEBox(alpha float64, th Theta) (float64, error) {
	if err := checkAlpha(alpha); err != nil {
		return 0, err
	}
	if err := checkTheta(th, false); err != nil {
		return 0, err
	}
	g, h := BoxParams(th)
	return finiteLimit("SPE", g*ChiSquare(1-alpha, h))
}

// SPEJacksonMudholkar is the SPE limit of Jackson & Mudholkar (1979),
// Technometrics 21(3):341–349:
//
//	h₀ = 1 − 2θ₁θ₃/(3θ₂²)
//	Q_α = θ₁ [ z_{1−α} √(2θ₂h₀²)/θ₁ + 1 + θ₂h₀(h₀ − 1)/θ₁² ]^{1/h₀}
func SPEJacksonMudholkar(alpha float64, th Theta) (float64, error) {
	if err := checkAlpha(alpha); err != nil {
		return 0, err
	}
	if err := checkTheta(th, true); err != nil {
		return 0, err
	}
	h0 := JMh0(th)
	z := Normal(1 - alpha)
	base := z*math.Sqrt(2*th.T2*h0*h0)/th.T1 + 1 + th.T2*h0*(h0-1)/(th.T1*th.T1)
	if !(base > 0) || h0 == 0 {
		return 0, fmt.Errorf("%w: Jackson–Mudholkar bracket %v (h₀ = %v) not positive", ErrDomain, base, h0)
	}
	return finiteLimit("SPE", th.T1*math.Pow(base, 1/h0))
}

// JMh0 returns h₀ = 1 − 2θ₁θ₃/(3θ₂²) of Jackson & Mudholkar (1979).
func JMh0(th Theta) float64 {
	return 1 - 2*th.T1*th.T3/(3*th.T2*th.T2)
}

// PhiLimit is the limit ζ² of the combined index φ = SPE/δ² + T²/τ² of
// Yue & Qin (2001), Ind. Eng. Chem. Res. 40:4403–4414, by Box's approximation
// applied to the quadratic form zᵀΦz with covariance S of z:
//
//	g_φ = tr((SΦ)²)/tr(SΦ),  h_φ = tr(SΦ)²/tr((SΦ)²),  ζ² = g_φ·χ²_{1−α}(h_φ)
//
// trSPhi and trSPhi2 are tr(SΦ) and tr((SΦ)²); for orthogonal eigenvector
// loadings they equal l/τ² + θ₁/δ² and l/τ⁴ + θ₂/δ⁴ (see PhiTraces).
func PhiLimit(alpha, trSPhi, trSPhi2 float64) (float64, error) {
	if err := checkAlpha(alpha); err != nil {
		return 0, err
	}
	if !(trSPhi > 0 && trSPhi2 > 0) || math.IsInf(trSPhi, 1) || math.IsInf(trSPhi2, 1) {
		return 0, fmt.Errorf("%w: φ traces %v, %v must be positive and finite", ErrDomain, trSPhi, trSPhi2)
	}
	g := trSPhi2 / trSPhi
	h := trSPhi * trSPhi / trSPhi2
	return finiteLimit("φ", g*ChiSquare(1-alpha, h))
}

// PhiTraces returns tr(SΦ) and tr((SΦ)²) for Φ = D/τ² + C̃/δ² when the
// loadings are orthogonal eigenvectors of S (l retained, residual traces θ),
// so the cross term tr(SDSC̃) vanishes:
//
//	tr(SΦ) = l/τ² + θ₁/δ²,  tr((SΦ)²) = l/τ⁴ + θ₂/δ⁴
//
// cross adds 2·cross/(τ²δ²) to tr((SΦ)²) for non-orthogonal loadings,
// where cross = tr(SDSC̃).
func PhiTraces(l int, tau2, delta2 float64, th Theta, cross float64) (trSPhi, trSPhi2 float64) {
	fl := float64(l)
	trSPhi = fl/tau2 + th.T1/delta2
	trSPhi2 = fl/(tau2*tau2) + 2*cross/(tau2*delta2) + th.T2/(delta2*delta2)
	return trSPhi, trSPhi2
}

// RBC is the control limit of a reconstruction-based contribution
// RBCᵢ = (ξᵢᵀMx)²/(ξᵢᵀMξᵢ), which for x ~ N(0, S) is distributed as
// gᵢ·χ²(1) (Alcalá & Qin 2009, Automatica 45(7):1593–1600):
//
//	gᵢ = (MSM)ᵢᵢ / Mᵢᵢ,  limit = gᵢ · χ²_{1−α}(1)
//
// chi1 is χ²_{1−α}(1) (see ChiSquare), passed in so callers evaluating many
// channels compute it once.
func RBC(chi1, mSMii, mii float64) float64 {
	if !(mii > 0) {
		return math.Inf(1)
	}
	return mSMii / mii * chi1
}

// KthLargest returns the k-th largest value of x (k = 1 is the maximum),
// using scratch (len ≥ len(x)) for a copy so x is left as is. NaN values
// are an error.
func KthLargest(x []float64, k int, scratch []float64) (float64, error) {
	if k < 1 || k > len(x) {
		return 0, fmt.Errorf("%w: k = %d outside 1..%d", ErrDomain, k, len(x))
	}
	if len(scratch) < len(x) {
		scratch = make([]float64, len(x))
	}
	s := scratch[:len(x)]
	copy(s, x)
	for i, v := range s {
		if math.IsNaN(v) {
			return 0, fmt.Errorf("%w: reference value %d is NaN", ErrDomain, i)
		}
	}
	sort.Float64s(s)
	return s[len(s)-k], nil
}

// Empirical returns the empirical upper limit of a reference log x at
// false-alarm rate α: the k-th largest value with k = ⌊α·n⌋ + 1, so that at
// most ⌊α·n⌋ reference values lie strictly above it. With n = 960 and
// α = 0.01 this is the 10th-largest value, as in the Tennessee Eastman
// benchmark tables (Russell, Chiang & Braatz 2000).
func Empirical(alpha float64, x []float64, scratch []float64) (float64, error) {
	if err := checkAlpha(alpha); err != nil {
		return 0, err
	}
	if len(x) == 0 {
		return 0, fmt.Errorf("%w: empty reference log", ErrDomain)
	}
	k := int(math.Floor(alpha*float64(len(x)))) + 1
	if k > len(x) {
		k = len(x)
	}
	return KthLargest(x, k, scratch)
}
