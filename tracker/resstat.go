package tracker

import (
	"math"

	"gonum.org/v1/gonum/blas/blas64"

	"modewatch/tracker/limits"
)

// Defaults of the residual statistics (Config.Residual, Config.Variance).
const (
	// DefaultResidualRidge is the ridge ε_R of the residual Mahalanobis
	// statistic: Ω = (A + ε_R·I)⁻¹. It bounds the weight of a direction the
	// reference data held exactly (a duplicated channel) at 1/ε_R, and is
	// small enough that a relation holding a channel to 1 % of its
	// standard deviation (conditional variance 10⁻⁴ in standardized units)
	// keeps half its weight.
	DefaultResidualRidge = 1e-4
	// DefaultVarianceLambda is the EWMA weight λ of the variance statistic
	// (a memory of about 1/λ = 20 frames).
	DefaultVarianceLambda = 0.05
)

// resStat holds the residual Mahalanobis statistic and the per-channel
// variance statistic of a Tracker (Config.Residual, Config.Variance).
//
// Residual Mahalanobis. With Ω = (A + ε_R I)⁻¹ and D = P(PᵀAP)⁺Pᵀ (the T²
// matrix), the statistic is the Mahalanobis distance of the frame left
// after its mode scores are accounted for:
//
//	R = zᵀ(Ω − D)z = zᵀΩz − T²
//
// For ε_R = 0, z ~ N(0, A) and A nonsingular, M = Ω − D satisfies MAM = M
// (derived: ΩAD = D and DAD = D), so R ~ χ²(p − r), the conditional
// Mahalanobis distance of z given t = Pᵀz; unlike SPE it weighs each
// residual direction by how tightly the reference data held it. Limit
// χ²_{1−α}(p_in − r) (Wilson–Hilferty form for a frame with missing
// channels, on p_in − r − |missing| degrees of freedom). The
// reconstruction-based contribution of channel i (Alcalá & Qin 2009, for
// an index zᵀMz) is
//
//	RBCᵢ = (Mz)ᵢ² / Mᵢᵢ,  in control ~ χ²(1) since (MAM)ᵢᵢ = Mᵢᵢ,
//
// with limit χ²_{1−α}(1).
//
// Variance statistic. rᵢ = (Ωz)ᵢ/√Ωᵢᵢ is channel i's deviation from its
// conditional expectation given every other channel, in its own
// conditional standard deviations (about N(0, 1) in control). Its square
// is smoothed, qᵢ ← (1 − λ)qᵢ + λrᵢ², and compared with its normal level
// ℓᵢ (the EW mean of rᵢ² while the tracker learns; 1 for a fitted
// baseline): V = maxᵢ qᵢ/ℓᵢ. For independent frames qᵢ has mean 1 and
// variance 2λ/(2 − λ) (EWMA of χ²₁); matching two moments to g·χ²(h)
// (Satterthwaite 1946) gives g = λ/(2 − λ), h = (2 − λ)/λ, and the limit
// g·χ²_{1−α/p_in}(h) with a Bonferroni share α/p_in per channel. A sensor
// that only got noisier raises its own qᵢ, which names it.
//
// Cost: per refresh a Cholesky factor and its inverse, O(p³/3); per frame
// two triangular solves, O(p²). Storage 2p² + O(p), allocated in New.
type resStat struct {
	p            int
	res, vr      bool
	ridge, lam   float64
	u, uinv      []float64 // upper Cholesky factor of A + ε_R I and its inverse (row-major p × p)
	panel        []float64
	omd          []float64 // Ωᵢᵢ
	mii          []float64 // Mᵢᵢ = Ωᵢᵢ − Dᵢᵢ
	s, v         []float64 // scratch: forward solve, Ωz
	rbc          []float64 // last frame's RBC of R
	q, lvl       []float64 // variance EWMA and its normal level
	lvlN         []float64 // frames behind lvl (cumulative start)
	ok           bool
	dims         int
	lim, rbcLim  float64
	vlim, vg, vh float64
	zAlpha       float64 // z_{1−α} for the Wilson–Hilferty limit
}

func newResStat(p int, cfg *Config) *resStat {
	if !cfg.Residual && !cfg.Variance {
		return nil
	}
	rs := &resStat{
		p: p, res: cfg.Residual, vr: cfg.Variance, ridge: cfg.ResidualRidge, lam: cfg.VarianceLambda,
		u: make([]float64, p*p), uinv: make([]float64, p*p), panel: make([]float64, p*cholBlock),
		omd: make([]float64, p), mii: make([]float64, p), s: make([]float64, p), v: make([]float64, p),
		rbc: make([]float64, p), q: make([]float64, p), lvl: make([]float64, p), lvlN: make([]float64, p),
	}
	for i := range rs.q {
		rs.q[i], rs.lvl[i] = 1, 1
	}
	rs.zAlpha = limits.Normal(1 - cfg.Alpha)
	rs.rbcLim = limits.ChiSquare(1-cfg.Alpha, 1)
	rs.vg = rs.lam / (2 - rs.lam)
	rs.vh = (2 - rs.lam) / rs.lam
	return rs
}

// refresh factors A + ε_R I of the new model m and sets the limits.
// Channels out of the model have zero rows of A: their Ω entries are 1/ε_R
// on the diagonal and zero elsewhere, and their z is 0, so they add
// nothing to R.
func (rs *resStat) refresh(m *model, alpha float64) {
	p := rs.p
	rs.ok = factorInverse(rs.u, rs.uinv, rs.panel, m.a.RawSymmetric(), p, rs.ridge)
	if !rs.ok {
		return
	}
	inv := rs.uinv
	// Ω = U⁻¹U⁻ᵀ: Ωᵢᵢ = ‖row i of U⁻¹‖².
	pin := 0
	for i := 0; i < p; i++ {
		s := 0.0
		for _, v := range inv[i*p+i : i*p+p] {
			s += v * v
		}
		rs.omd[i] = s
		rs.mii[i] = 0
		if m.include[i] {
			pin++
			rs.mii[i] = s - m.base.dd[i]
		}
	}
	rs.dims = max(pin-m.r, 1)
	rs.lim = limits.ChiSquare(1-alpha, float64(rs.dims))
	rs.vlim = rs.vg * limits.ChiSquare(1-alpha/float64(max(pin, 1)), rs.vh)
}

// factorInverse sets u to the upper Cholesky factor of A + εI (row-major
// p × p, A in the upper triangle of a) and inv to U⁻¹, by cholUpper and
// back substitution: O(p³/3) multiply-adds in all. It reports false when
// A + εI is not positive definite.
func factorInverse(u, inv, panel []float64, a blas64.Symmetric, p int, ridge float64) bool {
	for i := 0; i < p; i++ {
		copy(u[i*p+i:i*p+p], a.Data[i*a.Stride+i:i*a.Stride+p])
		u[i*p+i] += ridge
	}
	if !cholUpper(u, p, p, panel) {
		return false
	}
	for i := range inv {
		inv[i] = 0
	}
	for j := 0; j < p; j++ {
		inv[j*p+j] = 1 / u[j*p+j]
		for i := j - 1; i >= 0; i-- {
			s := 0.0
			for k := i + 1; k <= j; k++ {
				s += u[i*p+k] * inv[k*p+j]
			}
			inv[i*p+j] = -s / u[i*p+i]
		}
	}
	return true
}

// score computes R and V for the standardized, imputed frame z, with dz = Dz
// and t2 from the scoring path; nMiss is the number of missing (imputed)
// channels, obs and stuck mark the channels seen in the frame. advance
// moves the variance EWMA (Step, not Evaluate) and learn also its normal
// levels.
func (rs *resStat) score(dst *Score, m *model, z, dz []float64, t2 float64, nMiss int, obs, stuck []bool, advance, learn bool) {
	dst.Residual, dst.ResidualLimit, dst.Variance, dst.VarianceLimit, dst.VarianceChannel = 0, 0, 0, 0, -1
	if !rs.ok {
		return
	}
	p := rs.p
	u, s, v := rs.u, rs.s, rs.v
	// Uᵀs = z (row-oriented forward substitution), then U v = s.
	copy(s, z[:p])
	for k := 0; k < p; k++ {
		sk := s[k] / u[k*p+k]
		s[k] = sk
		if sk == 0 {
			continue
		}
		row := u[k*p+k+1 : k*p+p]
		rest := s[k+1 : p]
		for j, x := range row {
			rest[j] -= x * sk
		}
	}
	for i := p - 1; i >= 0; i-- {
		acc := s[i]
		row := u[i*p+i+1 : i*p+p]
		for j, x := range row {
			acc -= x * v[i+1+j]
		}
		v[i] = acc / u[i*p+i]
	}
	if rs.res {
		q := 0.0
		for i := 0; i < p; i++ {
			q += z[i] * v[i]
		}
		r := max(q-t2, 0)
		dst.Residual = r
		dst.ResidualLimit = rs.lim
		if nMiss > 0 {
			dst.ResidualLimit = wilsonHilferty(float64(max(rs.dims-nMiss, 1)), rs.zAlpha)
		}
		for i := 0; i < p; i++ {
			rs.rbc[i] = 0
			if mi := rs.mii[i]; mi > 0 && m.include[i] {
				d := v[i] - dz[i]
				rs.rbc[i] = d * d / mi
			}
		}
	}
	if rs.vr {
		best, bi := 0.0, -1
		for i := 0; i < p; i++ {
			if !m.include[i] || !obs[i] || stuck[i] || !(rs.omd[i] > 0) {
				continue
			}
			ri := v[i] / math.Sqrt(rs.omd[i])
			r2 := ri * ri
			if advance {
				rs.q[i] += rs.lam * (r2 - rs.q[i])
			}
			if learn {
				// EW mean of r² with the cumulative start (weight 1/n until
				// the forgetting of the variance statistic's own memory
				// takes over at 1/n = λ/10).
				rs.lvlN[i]++
				a := math.Max(1/rs.lvlN[i], rs.lam/10)
				rs.lvl[i] += a * (r2 - rs.lvl[i])
			}
			if x := rs.q[i] / rs.lvl[i]; x > best {
				best, bi = x, i
			}
		}
		dst.Variance, dst.VarianceLimit, dst.VarianceChannel = best, rs.vlim, bi
	}
}

// wilsonHilferty is the χ² quantile on ν degrees of freedom at the normal
// quantile z (Wilson & Hilferty 1931; Johnson, Kotz & Balakrishnan,
// Continuous Univariate Distributions 1, §18.8): ν(1 − 2/(9ν) + z√(2/(9ν)))³.
// Within 2 % of the exact quantile at the upper 1 % and 0.1 % for ν ≥ 3
// (TestWilsonHilferty).
func wilsonHilferty(nu, z float64) float64 {
	c := 2 / (9 * nu)
	b := 1 - c + z*math.Sqrt(c)
	return nu * b * b * b
}

// ResidualContributionsTo copies the per-channel RBC of the residual
// Mahalanobis statistic of the last scored frame into dst (len p); zeros
// when Config.Residual is off.
func (t *Tracker) ResidualContributionsTo(dst []float64) {
	if t.rs == nil || !t.rs.res {
		for i := range dst {
			dst[i] = 0
		}
		return
	}
	copy(dst, t.rs.rbc)
}

// rankResidual reports whether the contributors of the frame in dst are
// ranked by the RBC of the residual Mahalanobis statistic instead of the
// index (φ or SPE, value index against limit indexLim): with
// Config.RankResidual, when R is further over its limit than the index.
// A fault that breaks a tight relation is then named by the channels of
// that relation, which the index's RBC can spread over loosely held ones.
func (t *Tracker) rankResidual(dst *Score, index, indexLim float64) bool {
	if t.rs == nil || !t.rs.res || !t.cfg.RankResidual || !(dst.ResidualLimit > 0) || !(indexLim > 0) {
		return false
	}
	return dst.Residual/dst.ResidualLimit > index/indexLim
}
