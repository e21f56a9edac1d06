package tracker

import (
	"math"

	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"
)

// SerialLags is the number of lags at which a channel's autocorrelation is
// sampled for [SerialFactor]: lag 2^m frames for m = 0 … SerialLags−1
// (1, 2, 4, …, 2048 frames).
const SerialLags = 12

// SerialLag returns lag m of the sampled autocorrelation, 2^m frames.
func SerialLag(m int) int { return 1 << m }

// ShrinkRule selects how Refresh shrinks the correlation of the
// standardized channels toward the identity (see [Tracker.SetSerialFactors]).
type ShrinkRule int

// Shrink rules.
const (
	// ShrinkNone keeps the sample correlation (the default).
	ShrinkNone ShrinkRule = iota
	// ShrinkWhole shrinks every correlation by one intensity λ,
	// R* = (1 − λ)R + λI (Schäfer & Strimmer 2005, target "D" on the
	// correlation scale; Ledoit & Wolf 2004):
	//  λ = min(1, Σ_{i≠j} Var(r_ij) / Σ_{i≠j} r_ij²)
	ShrinkWhole
	// ShrinkChannel gives every channel its own factor dᵢ ∈ [0, 1] and
	// shrinks pair (i, j) by dᵢdⱼ. R* = DRD + (I − D²) is positive
	// semidefinite whenever R is (a congruence plus a non-negative
	// diagonal). D minimizes, one channel at a time from D = I (20
	// sweeps), the expected squared error of the shrunk correlations on
	// Fisher's z scale (z = atanh r, whose sampling variance S_ij/n_ij does
	// not depend on r; Fisher 1921, from memory), to first order:
	//  dᵢ = min(1, Σ_{j≠i} dⱼ·max(0, q_ij − u_ij) / Σ_{j≠i} dⱼ²·q_ij)
	//  q_ij = r_ij²/(1 − r_ij²)²,  u_ij = S_ij/n_ij
	// where q − u is the unbiased estimate of the squared true value
	// (as in Schäfer & Strimmer 2005). A channel with one relation
	// beyond 5 standard errors (q > 25u) keeps dᵢ = 1, so that a bias
	// still breaks its relations; a channel whose every correlation is
	// within its sampling noise leaves the modes.
	ShrinkChannel
)

// SerialFactor returns Bartlett's variance-inflation factor of the sample
// correlation between two series whose autocorrelations at lags
// [SerialLag](m) are a[m] and b[m] (either may be shorter; lags beyond
// the shorter are not known):
//
//	S = Σ_{k=−∞}^{∞} ρ_a(k)·ρ_b(k) = 1 + 2·Σ_{k≥1} ρ_a(k)·ρ_b(k)
//
// so that for two independent series of n frames Var(r) ≈ S/n (Bartlett
// 1946, J. R. Statist. Soc. Suppl. 8; Bayley & Hammersley 1946 for the
// effective sample size n/S; from memory). Between sampled lags a
// positive falling product is taken geometric in k (exact for AR(1)
// series), any other linear (trapezoids over (2^(m−1), 2^m]); beyond the
// last known lag a product still positive and falling decays
// geometrically at the rate of its last octave. S is at least 1.
func SerialFactor(a, b []float64) float64 {
	n := min(len(a), len(b))
	if n == 0 {
		return 1
	}
	g := func(m int) float64 { return a[m] * b[m] }
	sum := g(0)
	for m := 1; m < n; m++ {
		w := SerialLag(m) - SerialLag(m-1)
		g0, g1 := g(m-1), g(m)
		if g0 > 0 && g1 > 0 && g1 < g0 {
			// Geometric between the lags: Σ_{k=1}^{w} g0·qᵏ, q^w = g1/g0.
			q := math.Pow(g1/g0, 1/float64(w))
			sum += g0 * q * (1 - g1/g0) / (1 - q)
			continue
		}
		sum += float64(w) * (g0 + g1) / 2
	}
	if n >= 2 {
		last, prev := g(n-1), g(n-2)
		if last > 0 && prev > last {
			q := math.Pow(last/prev, 1/float64(SerialLag(n-1)-SerialLag(n-2)))
			sum += last * q / (1 - q)
		}
	}
	return math.Max(1, 1+2*sum)
}

// SerialFactorsTo fills dst (p × p, p = len(rho)) with [SerialFactor] of
// every pair of channels, rho[i] being channel i's autocorrelations at
// lags [SerialLag] (nil: unknown, taken as serially uncorrelated, S = 1).
func SerialFactorsTo(dst *mat.SymDense, rho [][]float64) {
	if dst.SymmetricDim() != len(rho) {
		panic("tracker: SerialFactorsTo: dst is not p × p")
	}
	for i := range rho {
		for j := i; j < len(rho); j++ {
			if i == j {
				dst.SetSym(i, i, 1)
				continue
			}
			dst.SetSym(i, j, SerialFactor(rho[i], rho[j]))
		}
	}
}

// shrinkKeep is the ratio q_ij/u_ij (a squared z statistic: 5 standard
// errors) beyond which one relation keeps channel i whole under
// ShrinkChannel (dᵢ = 1). Chosen on the realism suite between 6.63
// (χ²₁ at 1 %) and 25; see the README (Shrinking chance correlations).
const shrinkKeep = 25

// shrinkSweeps is the number of sweeps of ShrinkChannel's coordinate
// descent.
const shrinkSweeps = 20

// shrinker holds the serial factors and scratch of the correlation
// shrinkage.
type shrinker struct {
	rule ShrinkRule
	s    *mat.SymDense // Bartlett factors S_ij
	d    []float64     // per-channel factor dᵢ
}

// SetSerialFactors makes every Refresh shrink the correlation of the
// standardized channels toward the identity by rule, the sampling
// variance of each correlation taken as
//
//	Var(r_ij) ≈ (1 − r_ij²)² · S_ij / n_ij,   n_ij = min(n_i, n_j)
//
// with S_ij = s[i][j] Bartlett's factor ([SerialFactorsTo]) and n_i the
// Kish effective sample size of channel i's exponential weights. The
// (1 − r²)² factor is the large-sample variance of a correlation of
// serially independent normal pairs (common practice). A nil s or
// ShrinkNone turns the shrinkage off; s must be P × P. The factors are
// copied, and are not carried by Grow or by the checkpoint: the caller
// sets them again after either.
func (t *Tracker) SetSerialFactors(s *mat.SymDense, rule ShrinkRule) {
	if s == nil || rule == ShrinkNone {
		t.shr = nil
		return
	}
	if s.SymmetricDim() != t.p {
		panic("tracker: SetSerialFactors: factors are not P × P")
	}
	sh := &shrinker{rule: rule, s: mat.NewSymDense(t.p, nil),
		d: make([]float64, t.p)}
	sh.s.CopySym(s)
	t.shr = sh
}

// shrink applies the shrinkage set by SetSerialFactors to the correlation
// a over the included channels (a no-op without it or after Grow).
func (t *Tracker) shrink(a *mat.SymDense, include []bool) {
	sh := t.shr
	if sh == nil || sh.s.SymmetricDim() != t.p {
		return
	}
	p := t.p
	raw, s := a.RawSymmetric(), sh.s.RawSymmetric()
	if sh.rule == ShrinkChannel {
		t.shrinkChannels(raw, s, include)
	} else {
		var num, den float64
		for i := 0; i < p; i++ {
			if !include[i] {
				continue
			}
			for j := i + 1; j < p; j++ {
				if !include[j] {
					continue
				}
				r := raw.Data[i*raw.Stride+j]
				v := 1.0
				if n := math.Min(t.ew.NEff(i), t.ew.NEff(j)); n > 0 {
					v = (1 - r*r) * (1 - r*r) * s.Data[i*s.Stride+j] / n
				}
				num += v
				den += r * r
			}
		}
		d := 0.0
		if den > 0 {
			d = math.Sqrt(1 - math.Min(1, num/den))
		}
		for i := range sh.d {
			sh.d[i] = d
		}
	}
	for i := 0; i < p; i++ {
		row := raw.Data[i*raw.Stride : i*raw.Stride+p]
		for j := i + 1; j < p; j++ {
			row[j] *= sh.d[i] * sh.d[j]
		}
	}
}

// shrinkChannels sets the factors dᵢ of ShrinkChannel from the correlation
// raw and the serial factors s.
func (t *Tracker) shrinkChannels(raw, s blas64.Symmetric, include []bool) {
	sh, p := t.shr, t.p
	for i := range sh.d {
		sh.d[i] = 1
	}
	for range shrinkSweeps {
		for i := 0; i < p; i++ {
			if !include[i] {
				continue
			}
			keep := false
			var num, den float64
			ni := t.ew.NEff(i)
			for j := 0; j < p; j++ {
				if j == i || !include[j] {
					continue
				}
				a, b := i, j
				if a > b {
					a, b = b, a
				}
				r := raw.Data[a*raw.Stride+b]
				n := math.Min(ni, t.ew.NEff(j))
				om := math.Max(1-r*r, 1e-6)
				q := r * r / (om * om)
				u := s.Data[a*s.Stride+b] / n
				keep = keep || q > shrinkKeep*u
				num += sh.d[j] * math.Max(0, q-u)
				den += sh.d[j] * sh.d[j] * q
			}
			sh.d[i] = 0
			if keep {
				sh.d[i] = 1
				continue
			}
			if den > 0 {
				sh.d[i] = math.Min(1, num/den)
			}
		}
	}
}
