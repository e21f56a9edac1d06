// Package modes finds sparse principal components ("modes") of a symmetric
// positive semidefinite matrix A (in modewatch: the covariance of the
// standardized channels) and tracks them as A changes.
//
// A mode is a unit vector x with few nonzero loadings that captures a large
// share of the variance xᵀAx; its support names the handful of sensors that
// move together. Every solver in this package is an instance of the
// conditional gradient algorithm with unit step (ConGradU; Luss & Teboulle,
// "Conditional gradient algorithms for rank-one matrix approximations with a
// sparsity constraint", SIAM Review 55(1):65–98, 2013): each iteration
// maximises the linearisation of a convex objective over the constraint set,
//
//	x⁺ ∈ argmax{ ⟨∇f(x), u⟩ − g(u) : u ∈ C },
//
// so the objective f(x) − g(x) never decreases. With f(x) = xᵀAx the gradient
// is 2Ax and the step becomes a thresholded power step. With T_k keeping the
// k entries of largest magnitude (ties: lowest index) and
// S_τ(c) = sign(c)·max(|c| − τ, 0):
//
//	Dense     x⁺ = Ax/‖Ax‖                              (power method)
//	L0        x⁺ = T_k(Ax)/‖T_k(Ax)‖                    ‖x‖₀ ≤ k (truncated power method, Yuan & Zhang 2013)
//	L1        x⁺ = S_λ(Ax)/‖S_λ(Ax)‖                    ‖x‖₁ ≤ s, λ exact by sorting (Witten, Tibshirani & Hastie 2009)
//	L0Pen     x⁺ ∝ (Ax)_i where (Ax)_i² > γ·xᵀAx        max xᵀAx − γ‖x‖₀ (Journée, Nesterov, Richtárik & Sepulchre 2010, A-form)
//	L1Pen     x⁺ = S_{γ/2}(Ax)/‖·‖                       max xᵀAx − γ‖x‖₁
//	L1PenSqrt x⁺ = S_{γ√(xᵀAx)}(Ax)/‖·‖                  max √(xᵀAx) − γ‖x‖₁ (Journée et al. 2010)
//	LogPen    x⁺ = S_{(γ/2)w}(Ax)/‖·‖, w_i = φ′(|x_i|)   φ(t) = log(1 + t/ε)/log(1 + 1/ε)
//	ExpPen    x⁺ = S_{(γ/2)w}(Ax)/‖·‖, w_i = φ′(|x_i|)   φ(t) = 1 − exp(−t/ε)
//
// The soft-thresholding variants shrink the kept loadings; by default their
// result is refitted: the leading eigenvector of A restricted to the support
// found (a power iteration on the support).
//
// Several modes come from deflation (Mackey, "Deflation methods for sparse
// PCA", NIPS 21, 2008): projection deflation A ← (I − xxᵀ)A(I − xxᵀ) by
// default, Schur-complement deflation A ← A − AxxᵀA/(xᵀAx) as an option. Both
// keep A positive semidefinite and both are applied implicitly, so a product
// with the deflated matrix costs a product with A plus O(p) per mode. Because
// sparse loadings are not orthogonal, the variance explained by a set of modes
// is the adjusted variance of Zou, Hastie & Tibshirani (J. Comput. Graph.
// Stat. 15, 2006): R_jj² with R the upper Cholesky factor of VᵀAV.
//
// [Solve] finds one mode with a caller-owned [Workspace]; a [Set] holds
// several modes of a changing matrix and refreshes them, warm-started,
// without allocating.
package modes

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Method selects the sparsity model of a mode.
type Method int

// The sparsity models; see the package documentation for each iteration.
const (
	Dense     Method = iota // no sparsity: the ordinary leading eigenvector (power method)
	L0                      // at most K nonzero loadings (truncated power method)
	L1                      // ‖x‖₁ ≤ S with 1 ≤ S ≤ √p; S = √k is the convex relaxation of k nonzeros and gives at least k
	L0Pen                   // penalty Gamma per nonzero loading: max xᵀAx − γ‖x‖₀
	L1Pen                   // squared form: max xᵀAx − γ‖x‖₁ (threshold γ/2, independent of the scale of A)
	L1PenSqrt               // square-root form: max √(xᵀAx) − γ‖x‖₁ (threshold γ√(xᵀAx), scale-adaptive)
	LogPen                  // smooth-ℓ0 penalty, log surrogate, reweighted ℓ1
	ExpPen                  // smooth-ℓ0 penalty, exponential surrogate, reweighted ℓ1
)

var methodNames = [...]string{
	Dense:     "none",
	L0:        "l0",
	L1:        "l1",
	L0Pen:     "l0pen",
	L1Pen:     "l1pen",
	L1PenSqrt: "l1sqrt",
	LogPen:    "logpen",
	ExpPen:    "exppen",
}

// String returns the flag spelling of m ("none", "l0", "l1", "l0pen",
// "l1pen", "l1sqrt", "logpen", "exppen").
func (m Method) String() string {
	if m < 0 || int(m) >= len(methodNames) {
		return "Method(" + strconv.Itoa(int(m)) + ")"
	}
	return methodNames[m]
}

// DefaultEps is the ε of the smooth-ℓ0 surrogates when the flag omits it.
// 0.1 is the value used for the Pitprops check values of the tests.
const DefaultEps = 0.1

// Sparsity is the sparsity model of one mode. Only the fields of its Method
// are used: K for L0, S for L1, Gamma for the penalties and Eps for LogPen and
// ExpPen. The zero value is Dense.
type Sparsity struct {
	Method Method
	K      int     // L0: number of nonzero loadings, 1 ≤ K ≤ p
	S      float64 // L1: bound on ‖x‖₁, 1 ≤ S ≤ √p
	Gamma  float64 // penalties: price per unit of ‖x‖₀, ‖x‖₁ or Σφ(|x_i|), in units of A (√A for L1PenSqrt), γ ≥ 0
	Eps    float64 // LogPen, ExpPen: ε > 0 of the surrogate φ (dimensionless, loadings are on the unit sphere)
}

// Errors returned by this package; test with errors.Is.
var (
	ErrSparsity       = errors.New("modes: invalid sparsity")
	ErrPenaltyTooHigh = errors.New("modes: penalty leaves no loading")
	ErrNotFinite      = errors.New("modes: matrix has a non-finite entry")
	ErrNotPSD         = errors.New("modes: matrix is not positive semidefinite")
	ErrZeroMatrix     = errors.New("modes: matrix is zero")
	ErrConfig         = errors.New("modes: invalid configuration")
	ErrCheckpoint     = errors.New("modes: invalid checkpoint")
)

// ParseSparsity parses the flag syntax of a sparsity model:
//
//	none            Dense
//	l0:K            L0, K nonzero loadings (integer)
//	l1:S            L1, ‖x‖₁ ≤ S
//	l0pen:G         L0Pen, γ = G
//	l1pen:G         L1Pen (squared form), γ = G
//	l1sqrt:G        L1PenSqrt (square-root form), γ = G
//	logpen:G[,EPS]  LogPen, γ = G, ε = EPS (default DefaultEps)
//	exppen:G[,EPS]  ExpPen, γ = G, ε = EPS (default DefaultEps)
//
// Method names are case-insensitive; surrounding spaces are ignored. Ranges
// that depend on the matrix (K ≤ p, S ≤ √p, γ below the largest variance) are
// checked when the model is used; here K ≥ 1, S ≥ 1, γ ≥ 0 and ε > 0.
func ParseSparsity(s string) (Sparsity, error) {
	in := strings.TrimSpace(s)
	name, arg, hasArg := strings.Cut(in, ":")
	name = strings.ToLower(strings.TrimSpace(name))
	arg = strings.TrimSpace(arg)
	bad := func(format string, a ...any) (Sparsity, error) {
		return Sparsity{}, fmt.Errorf("%w %q: %s", ErrSparsity, s, fmt.Sprintf(format, a...))
	}
	num := func(field, v string) (float64, error) {
		f, err := strconv.ParseFloat(strings.TrimSpace(v), 64)
		if err != nil {
			return 0, fmt.Errorf("%w %q: %s: %q is not a number", ErrSparsity, s, field, v)
		}
		if math.IsNaN(f) || math.IsInf(f, 0) {
			return 0, fmt.Errorf("%w %q: %s: must be finite", ErrSparsity, s, field)
		}
		return f, nil
	}
	var m Method = -1
	for i, n := range methodNames {
		if n == name {
			m = Method(i)
		}
	}
	if m < 0 {
		return bad("unknown method %q (want none, l0, l1, l0pen, l1pen, l1sqrt, logpen or exppen)", name)
	}
	if m == Dense {
		if hasArg {
			return bad("none takes no argument")
		}
		return Sparsity{}, nil
	}
	if !hasArg || arg == "" {
		return bad("%s needs an argument after ':'", name)
	}
	sp := Sparsity{Method: m}
	switch m {
	case L0:
		k, err := strconv.Atoi(arg)
		if err != nil {
			return bad("K: %q is not an integer", arg)
		}
		if k < 1 {
			return bad("K = %d: must be at least 1", k)
		}
		sp.K = k
	case L1:
		v, err := num("S", arg)
		if err != nil {
			return Sparsity{}, err
		}
		if v < 1 {
			return bad("S = %g: must be at least 1", v)
		}
		sp.S = v
	case L0Pen, L1Pen, L1PenSqrt:
		v, err := num("G", arg)
		if err != nil {
			return Sparsity{}, err
		}
		if v < 0 {
			return bad("G = %g: must not be negative", v)
		}
		sp.Gamma = v
	case LogPen, ExpPen:
		g, e, hasEps := strings.Cut(arg, ",")
		v, err := num("G", g)
		if err != nil {
			return Sparsity{}, err
		}
		if v < 0 {
			return bad("G = %g: must not be negative", v)
		}
		sp.Gamma, sp.Eps = v, DefaultEps
		if hasEps {
			ev, err := num("EPS", e)
			if err != nil {
				return Sparsity{}, err
			}
			if ev <= 0 {
				return bad("EPS = %g: must be positive", ev)
			}
			sp.Eps = ev
		}
	}
	return sp, nil
}

// String returns the flag spelling of s; ParseSparsity(s.String()) == s for
// every valid s (numbers are printed with the shortest exact representation).
func (s Sparsity) String() string {
	f := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	switch s.Method {
	case Dense:
		return "none"
	case L0:
		return "l0:" + strconv.Itoa(s.K)
	case L1:
		return "l1:" + f(s.S)
	case L0Pen, L1Pen, L1PenSqrt:
		return s.Method.String() + ":" + f(s.Gamma)
	case LogPen, ExpPen:
		return s.Method.String() + ":" + f(s.Gamma) + "," + f(s.Eps)
	}
	return s.Method.String()
}

// check validates s for a p × p matrix whose largest diagonal entry is
// maxDiag (pass +Inf when unknown).
func (s Sparsity) check(p int, maxDiag float64) error {
	bad := func(format string, a ...any) error {
		return fmt.Errorf("%w %s: %s", ErrSparsity, s, fmt.Sprintf(format, a...))
	}
	switch s.Method {
	case Dense:
	case L0:
		if s.K < 1 || s.K > p {
			return bad("K = %d outside [1, p = %d]", s.K, p)
		}
	case L1:
		if !(s.S >= 1 && s.S <= math.Sqrt(float64(p))) {
			return bad("S = %g outside [1, √p = %g]", s.S, math.Sqrt(float64(p)))
		}
	case L0Pen, L1Pen, L1PenSqrt, LogPen, ExpPen:
		if !(s.Gamma >= 0) || math.IsInf(s.Gamma, 0) {
			return bad("γ = %g must be finite and not negative", s.Gamma)
		}
		if s.Method == LogPen || s.Method == ExpPen {
			if !(s.Eps > 0) || math.IsInf(s.Eps, 0) {
				return bad("ε = %g must be finite and positive", s.Eps)
			}
		}
		// (Ax)_i² ≤ A_ii·xᵀAx for PSD A (Cauchy–Schwarz), so γ ≥ max A_ii
		// keeps nothing in the ℓ0-penalised map and γ ≥ max √A_ii nothing
		// in the square-root ℓ1 map (fixed-point conditions of the maps of
		// Luss & Teboulle 2013).
		if s.Method == L0Pen && s.Gamma >= maxDiag {
			return fmt.Errorf("%w: %s: γ = %g ≥ max A_ii = %g", ErrPenaltyTooHigh, s, s.Gamma, maxDiag)
		}
		if s.Method == L1PenSqrt && s.Gamma >= math.Sqrt(maxDiag) {
			return fmt.Errorf("%w: %s: γ = %g ≥ max √A_ii = %g", ErrPenaltyTooHigh, s, s.Gamma, math.Sqrt(maxDiag))
		}
	default:
		return fmt.Errorf("%w: unknown method %d", ErrSparsity, int(s.Method))
	}
	return nil
}
