package tracker

import (
	"math"

	"gonum.org/v1/gonum/mathext"
)

// PosteriorTo fills dst (len K) with the posterior probabilities
// P(C_k | x) = πₖ N(x; μₖ, Σₖ) / Σⱼ πⱼ N(x; μⱼ, Σⱼ) of the components for x
// (len D), computed from the log densities (shifted by their maximum, so
// a point far from every component still gets finite posteriors). It
// allocates nothing and returns dst.
func (m *Mixture) PosteriorTo(dst, x []float64) []float64 {
	if len(dst) != m.K() || len(x) != m.D {
		panic("tracker: PosteriorTo: length mismatch")
	}
	mx := math.Inf(-1)
	for k := range dst {
		dst[k] = m.logDensity(k, x)
		mx = math.Max(mx, dst[k])
	}
	s := 0.0
	for k, l := range dst {
		dst[k] = math.Exp(l - mx)
		s += dst[k]
	}
	for k := range dst {
		dst[k] /= s
	}
	return dst
}

// StateTail is one state model's view of a frame for [BIPRatio]: the
// frame's posterior probability of the state, the ratio ρ = statistic /
// limit of one statistic under the state's model, and the degrees of
// freedom h of the scaled χ² that the statistic's reference distribution
// is taken to be.
type StateTail struct {
	Posterior, Ratio, DOF float64
}

// BIPRatio combines one statistic of a frame scored by the models of K
// found operating states into one ratio on the scale of the state whose
// DOF is h, by Bayesian inference (Yu & Qin 2008, "Multimode process
// monitoring with Bayesian inference-based finite Gaussian mixture
// models", AIChE J. 54(7):1811–1829). In the cited work
//
//	BIP(x) = Σₖ P(Cₖ | x) · P_L⁽ᵏ⁾(x),   alarm when BIP(x) > 1 − α,
//
// where P_L⁽ᵏ⁾(x) is the probability that a normal frame of state k lies
// closer to the state's centre than x (the local probability of x in
// state k's control region). Here each state has its own monitoring model
// and limit L_k at 1 − α, so the local probability of a statistic with
// value v_k is taken from a scaled χ² with h_k degrees of freedom matched
// at the limit:
//
//	ρₖ = vₖ / Lₖ,   P_L⁽ᵏ⁾ = F_{χ²(hₖ)}(ρₖ · q(hₖ)),   q(h) = F⁻¹_{χ²(h)}(1 − α),
//
// exact for T² with its χ² limit (h = the modes r) and for SPE under
// Box's approximation with h its degrees of freedom; for any h,
// P_L⁽ᵏ⁾ = 1 − α exactly at the state's limit, so with one state the rule
// is that state's own. The posteriors are renormalised over the states
// given (Σ Posterior); the tail 1 − BIP = Σₖ P(Cₖ|x)(1 − P_L⁽ᵏ⁾) is summed
// in the upper-tail form (regularised upper incomplete gamma), so a frame
// far out keeps its precision. The result is the ratio on the scale of h:
//
//	ρ* = F̄⁻¹_{χ²(h)}(1 − BIP) / q(h),   ρ* > 1  ⟺  BIP > 1 − α.
//
// When the tail underflows (every state puts the frame beyond ~1e-300),
// ρ* is the ratio of the state with the largest posterior. Entries with a
// non-positive posterior, ratio NaN or DOF ≤ 0 are left out; none left:
// NaN. α and the quantiles q(h) come from q (nil: α = DefaultAlpha, each
// quantile computed). It allocates nothing.
func BIPRatio(states []StateTail, h float64, q *ChiQuantiles) float64 {
	if q == nil {
		q = &ChiQuantiles{alpha: DefaultAlpha}
	}
	tail, wsum := 0.0, 0.0
	best, bestP := math.NaN(), -1.0
	for _, s := range states {
		if !(s.Posterior > 0) || math.IsNaN(s.Ratio) || !(s.DOF > 0) {
			continue
		}
		wsum += s.Posterior
		tail += s.Posterior * chiTail(math.Max(s.Ratio, 0)*q.At(s.DOF), s.DOF)
		if s.Posterior > bestP {
			best, bestP = s.Ratio, s.Posterior
		}
	}
	if wsum == 0 || !(h > 0) {
		return math.NaN()
	}
	tail /= wsum
	switch {
	case tail <= 0:
		return best
	case tail >= 1:
		return 0
	}
	return 2 * mathext.GammaIncRegCompInv(h/2, tail) / q.At(h)
}

// ChiQuantiles holds the upper control quantiles q(h) = F⁻¹_{χ²(h)}(1 − α)
// of one α for [BIPRatio], kept for whole h up to a bound as they are
// first asked for (each is a root search); other h are computed each time.
type ChiQuantiles struct {
	alpha float64
	q     []float64 // by whole h; 0: not computed yet
}

// NewChiQuantiles returns the quantiles of α, kept for whole h ≤ maxH.
func NewChiQuantiles(alpha float64, maxH int) *ChiQuantiles {
	return &ChiQuantiles{alpha: alpha, q: make([]float64, max(maxH, 0)+1)}
}

// Alpha returns the α of the quantiles.
func (c *ChiQuantiles) Alpha() float64 { return c.alpha }

// At returns q(h). It allocates nothing.
func (c *ChiQuantiles) At(h float64) float64 {
	if i := int(h); float64(i) == h && i >= 0 && i < len(c.q) {
		if c.q[i] == 0 {
			c.q[i] = chiQuantile(1-c.alpha, h)
		}
		return c.q[i]
	}
	return chiQuantile(1-c.alpha, h)
}

// chiTail returns P(χ²(h) > x).
func chiTail(x, h float64) float64 { return mathext.GammaIncRegComp(h/2, x/2) }

// chiQuantile returns the lower-tail quantile of χ²(h) at p.
func chiQuantile(p, h float64) float64 { return 2 * mathext.GammaIncRegInv(h/2, p) }
