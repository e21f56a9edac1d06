package tracker

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
)

// Mixture is a Gaussian mixture model with full covariances, used to find
// operating states in a normal log when no state channel names them
// (Zhao, Zhang & Xu 2004; Yu & Qin 2008, Gaussian mixture models for
// multimode process monitoring). Fit it with [FitMixture]; [Mixture.Classify]
// assigns a point to its most probable component without allocating.
type Mixture struct {
	D int // dimension
	// Per component: weight π, mean μ (D), the inverse of the Cholesky
	// factor L⁻¹ of Σ = LLᵀ (D×D, row-major, lower) and the log of the
	// normalising constant: log π − ½ D log 2π − log det L.
	Weight  []float64
	Mean    [][]float64
	InvChol [][]float64
	LogNorm []float64
	// LogLik is the log-likelihood of the fitted data and BIC its Bayesian
	// information criterion (Schwarz 1978): −2 log L + m ln n, with
	// m = K·D + K·D(D+1)/2 + K − 1 free parameters.
	LogLik, BIC float64
	work        []float64
}

// K returns the number of components.
func (m *Mixture) K() int { return len(m.Weight) }

// logDensity returns log πₖ N(x; μₖ, Σₖ).
func (m *Mixture) logDensity(k int, x []float64) float64 {
	d := m.D
	mu, li := m.Mean[k], m.InvChol[k]
	q := 0.0
	for i := 0; i < d; i++ {
		s := 0.0
		for j := 0; j <= i; j++ {
			s += li[i*d+j] * (x[j] - mu[j])
		}
		q += s * s
	}
	return m.LogNorm[k] - q/2
}

// Classify returns the component with the largest posterior probability
// for x (len D). It allocates nothing.
func (m *Mixture) Classify(x []float64) int {
	best, bl := 0, math.Inf(-1)
	for k := range m.Weight {
		if l := m.logDensity(k, x); l > bl {
			best, bl = k, l
		}
	}
	return best
}

// MixtureConfig sets FitMixture's search.
type MixtureConfig struct {
	MaxK     int     // largest number of components tried (default 6)
	Restarts int     // EM runs per K from k-means++ starts (default 3)
	MaxIter  int     // EM iterations per run (default 200)
	Tol      float64 // stop when the mean log-likelihood gains less (default 1e-7)
	Reg      float64 // added to each covariance's diagonal (default 1e-6)
	Seed     uint64
}

// ErrMixture reports data a mixture cannot be fitted to.
var ErrMixture = errors.New("tracker: mixture")

// FitMixture fits Gaussian mixtures of 1 … MaxK components to the rows of
// x (n points of dimension D) by expectation–maximisation (Dempster, Laird
// & Rubin 1977) from k-means++ starts (Arthur & Vassilvitskii 2007), and
// returns the one with the smallest BIC. It is fit-time code and allocates.
func FitMixture(x [][]float64, cfg MixtureConfig) (*Mixture, error) {
	if cfg.MaxK == 0 {
		cfg.MaxK = 6
	}
	if cfg.Restarts == 0 {
		cfg.Restarts = 3
	}
	if cfg.MaxIter == 0 {
		cfg.MaxIter = 200
	}
	if cfg.Tol == 0 {
		cfg.Tol = 1e-7
	}
	if cfg.Reg == 0 {
		cfg.Reg = 1e-6
	}
	n := len(x)
	if n == 0 {
		return nil, fmt.Errorf("%w: no points", ErrMixture)
	}
	d := len(x[0])
	if d == 0 {
		return nil, fmt.Errorf("%w: dimension 0", ErrMixture)
	}
	rng := rand.New(rand.NewPCG(cfg.Seed, 0x6d6978))
	var best *Mixture
	for k := 1; k <= cfg.MaxK; k++ {
		if n < 2*k*(d+1) {
			break // too few points for k components
		}
		var kbest *Mixture
		for r := 0; r < cfg.Restarts; r++ {
			m, err := emFit(x, k, cfg, rng)
			if err != nil {
				continue
			}
			if kbest == nil || m.LogLik > kbest.LogLik {
				kbest = m
			}
			if k == 1 {
				break // deterministic
			}
		}
		if kbest == nil {
			continue
		}
		params := float64(k*d + k*d*(d+1)/2 + k - 1)
		kbest.BIC = -2*kbest.LogLik + params*math.Log(float64(n))
		if best == nil || kbest.BIC < best.BIC {
			best = kbest
		}
	}
	if best == nil {
		return nil, fmt.Errorf("%w: no mixture could be fitted to %d points of dimension %d", ErrMixture, n, d)
	}
	return best, nil
}

// emFit runs EM for k components from a k-means++ start.
func emFit(x [][]float64, k int, cfg MixtureConfig, rng *rand.Rand) (*Mixture, error) {
	n, d := len(x), len(x[0])
	m := &Mixture{D: d, Weight: make([]float64, k), Mean: make([][]float64, k), InvChol: make([][]float64, k),
		LogNorm: make([]float64, k)}
	// k-means++ seeding of the means.
	m.Mean[0] = append([]float64(nil), x[rng.IntN(n)]...)
	dist := make([]float64, n)
	for c := 1; c < k; c++ {
		total := 0.0
		for i, p := range x {
			dmin := math.Inf(1)
			for j := 0; j < c; j++ {
				dmin = math.Min(dmin, sqDist(p, m.Mean[j]))
			}
			dist[i] = dmin
			total += dmin
		}
		u := rng.Float64() * total
		pick := n - 1
		for i, v := range dist {
			if u -= v; u <= 0 {
				pick = i
				break
			}
		}
		m.Mean[c] = append([]float64(nil), x[pick]...)
	}
	// Start: hard assignment to the nearest mean, then the M step.
	resp := make([]float64, n*k)
	for i, p := range x {
		bj, bd := 0, math.Inf(1)
		for j := 0; j < k; j++ {
			if dd := sqDist(p, m.Mean[j]); dd < bd {
				bj, bd = j, dd
			}
		}
		resp[i*k+bj] = 1
	}
	cov := make([]float64, d*d)
	lp := make([]float64, k)
	prev := math.Inf(-1)
	for it := 0; it < cfg.MaxIter; it++ {
		// M step.
		for j := 0; j < k; j++ {
			nk := 0.0
			mu := m.Mean[j]
			for a := range mu {
				mu[a] = 0
			}
			for i, p := range x {
				r := resp[i*k+j]
				nk += r
				for a := range mu {
					mu[a] += r * p[a]
				}
			}
			if nk < float64(d+1) {
				return nil, fmt.Errorf("%w: component %d of %d emptied", ErrMixture, j, k)
			}
			for a := range mu {
				mu[a] /= nk
			}
			for a := range cov {
				cov[a] = 0
			}
			for i, p := range x {
				r := resp[i*k+j]
				if r == 0 {
					continue
				}
				for a := 0; a < d; a++ {
					da := p[a] - mu[a]
					for b := 0; b <= a; b++ {
						cov[a*d+b] += r * da * (p[b] - mu[b])
					}
				}
			}
			for a := 0; a < d; a++ {
				for b := 0; b <= a; b++ {
					cov[a*d+b] /= nk
				}
				cov[a*d+a] += cfg.Reg
			}
			m.Weight[j] = nk / float64(n)
			li, logDet, ok := invCholesky(cov, d)
			if !ok {
				return nil, fmt.Errorf("%w: component %d of %d singular", ErrMixture, j, k)
			}
			m.InvChol[j] = li
			m.LogNorm[j] = math.Log(m.Weight[j]) - 0.5*float64(d)*math.Log(2*math.Pi) - logDet
		}
		// E step and log-likelihood.
		ll := 0.0
		for i, p := range x {
			mx := math.Inf(-1)
			for j := 0; j < k; j++ {
				lp[j] = m.logDensity(j, p)
				mx = math.Max(mx, lp[j])
			}
			s := 0.0
			for j := 0; j < k; j++ {
				lp[j] = math.Exp(lp[j] - mx)
				s += lp[j]
			}
			for j := 0; j < k; j++ {
				resp[i*k+j] = lp[j] / s
			}
			ll += mx + math.Log(s)
		}
		m.LogLik = ll
		if ll-prev < cfg.Tol*float64(n) {
			break
		}
		prev = ll
	}
	return m, nil
}

func sqDist(a, b []float64) float64 {
	s := 0.0
	for i := range a {
		d := a[i] - b[i]
		s += d * d
	}
	return s
}

// invCholesky returns L⁻¹ (lower, row-major) for the symmetric positive
// definite matrix whose lower triangle is in a (d×d, row-major), and
// log det L = ½ log det Σ. ok is false if a is not positive definite.
func invCholesky(a []float64, d int) (li []float64, logDet float64, ok bool) {
	l := make([]float64, d*d)
	for i := 0; i < d; i++ {
		for j := 0; j <= i; j++ {
			s := a[i*d+j]
			for k := 0; k < j; k++ {
				s -= l[i*d+k] * l[j*d+k]
			}
			if i == j {
				if !(s > 0) {
					return nil, 0, false
				}
				l[i*d+i] = math.Sqrt(s)
				logDet += math.Log(l[i*d+i])
			} else {
				l[i*d+j] = s / l[j*d+j]
			}
		}
	}
	// Invert the lower-triangular L by forward substitution.
	li = make([]float64, d*d)
	for c := 0; c < d; c++ {
		for i := c; i < d; i++ {
			s := 0.0
			if i == c {
				s = 1
			}
			for k := c; k < i; k++ {
				s -= l[i*d+k] * li[k*d+c]
			}
			li[i*d+c] = s / l[i*d+i]
		}
	}
	return li, logDet, true
}

// AdjustedRand returns the adjusted Rand index of two labelings of the
// same points (Hubert & Arabie 1985): 1 for the same partition whatever
// the label names, about 0 for chance agreement:
//
//	ARI = (Σᵢⱼ C(nᵢⱼ,2) − E) / (½(Σᵢ C(aᵢ,2) + Σⱼ C(bⱼ,2)) − E)
//	E   = Σᵢ C(aᵢ,2) · Σⱼ C(bⱼ,2) / C(n,2)
//
// with nᵢⱼ the points labelled i in a and j in b, aᵢ and bⱼ the label
// counts. It measures found operating states against labelled ones.
func AdjustedRand(a, b []int) float64 {
	c2 := func(v int) float64 { return float64(v) * float64(v-1) / 2 }
	type pair struct{ i, j int }
	nij, ai, bj := map[pair]int{}, map[int]int{}, map[int]int{}
	for k := range a {
		nij[pair{a[k], b[k]}]++
		ai[a[k]]++
		bj[b[k]]++
	}
	var s, sa, sb float64
	for _, v := range nij {
		s += c2(v)
	}
	for _, v := range ai {
		sa += c2(v)
	}
	for _, v := range bj {
		sb += c2(v)
	}
	e := sa * sb / c2(len(a))
	den := (sa+sb)/2 - e
	if den == 0 {
		return 1
	}
	return (s - e) / den
}
