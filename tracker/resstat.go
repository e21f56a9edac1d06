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
// Ωz = U⁻¹(U⁻ᵀz), two triangular matrix–vector products, p² multiply-adds
// (omegaTimes). Storage 2p² + O(p), allocated in New.
type resStat struct {
	p            int
	res, vr      bool
	ridge, lam   float64
	u, uinv      []float64 // upper Cholesky factor U of A + ε_R I and U⁻¹ (row-major p × p); after refresh u holds U⁻ᵀ (lower)
	panel        []float64
	zb           []float64 // scratch of omegaTimes: 2 × p, the vector and a zero row
	omd          []float64 // Ωᵢᵢ
	mii          []float64 // Mᵢᵢ = Ωᵢᵢ − Dᵢᵢ
	v            []float64 // scratch: Ωz
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
		omd: make([]float64, p), mii: make([]float64, p), v: make([]float64, p), zb: make([]float64, 2*p),
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
	transposeUpper(rs.u, rs.uinv, p) // U⁻ᵀ for omegaTimes; the factor is not needed again
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
// forward substitution: row i of U⁻¹ solves Uᵀy = eᵢ (Golub & Van Loan,
// Matrix Computations, §3.1), all rows together by panels of the factor
// (forwardUnit, the factorization's AVX2/FMA kernel where the CPU has it):
// O(p³/3) multiply-adds in all. panel holds cholBlock·p values. It reports
// false when A + εI is not positive definite.
func factorInverse(u, inv, panel []float64, a blas64.Symmetric, p int, ridge float64) bool {
	for i := 0; i < p; i++ {
		copy(u[i*p+i:i*p+p], a.Data[i*a.Stride+i:i*a.Stride+p])
		u[i*p+i] += ridge
	}
	if !cholUpper(u, p, p, panel) {
		return false
	}
	forwardUnit(inv, p, u, p, nil, panel)
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
	v := rs.v
	rs.omegaTimes(v, z[:p])
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

// transposeUpper sets dst (row-major p × p) to the transpose of the upper
// triangular src, zero above the diagonal, by 8 × 8 tiles.
func transposeUpper(dst, src []float64, p int) {
	const tile = 8
	for i0 := 0; i0 < p; i0 += tile {
		for j0 := 0; j0 < p; j0 += tile {
			for i := i0; i < min(i0+tile, p); i++ {
				for j := j0; j < min(j0+tile, p); j++ {
					v := 0.0
					if j <= i {
						v = src[j*p+i]
					}
					dst[i*p+j] = v
				}
			}
		}
	}
}

// omegaTimes sets v = Ωz = U⁻¹(U⁻ᵀz) (len p each) from U⁻ᵀ (rs.u after
// refresh, lower) and U⁻¹ (rs.uinv, upper): s = U⁻ᵀz, sⱼ = Σ_{l≤j} (U⁻ᵀ)ⱼₗ zₗ,
// then vᵢ = Σ_{l≥i} (U⁻¹)ᵢₗ sₗ; two triangular matrix–vector products, p²
// multiply-adds in all, in dot form four rows at a time by the AVX2/FMA
// kernel of the covariance update (rowKernel) where the CPU has it. The
// dot of a row can run over zeros of the triangle past (or before) the
// diagonal so that its length is a multiple of 4. It computes Ωz through
// the inverse factor rather than by forward and back substitution with U
// (the same product; rounding differs), because the products have no
// chain of dependent steps. No allocation.
func (rs *resStat) omegaTimes(v, z []float64) {
	p := rs.p
	lt, ui := rs.u, rs.uinv
	b := rs.zb[:2*p] // [x; 0]: the kernel takes its columns in pairs, rows at stride p
	for j := range b[p:] {
		b[p+j] = 0
	}
	copy(b[:p], z)
	// s = U⁻ᵀz into v; rows j…j+3 of U⁻ᵀ are zero past j+3.
	j := 0
	for ; j+4 <= p; j += 4 {
		var c [8]float64
		if rowKernel(lt[j*p:], p, j+4, b, 2, c[:], 2, 1, 0) {
			v[j], v[j+1], v[j+2], v[j+3] = c[0], c[2], c[4], c[6]
			continue
		}
		for r := j; r < j+4; r++ {
			v[r] = dot(lt[r*p:r*p+r+1], z)
		}
	}
	for ; j < p; j++ {
		v[j] = dot(lt[j*p:j*p+j+1], z)
	}
	// v = U⁻¹s; rows i…i+3 of U⁻¹ are zero before i.
	copy(b[:p], v)
	s := b[:p]
	i := 0
	for ; i+4 <= p; i += 4 {
		i0 := p - roundUp4(p-i)
		var c [8]float64
		if i0 >= 0 && rowKernel(ui[i*p+i0:], p, p-i0, b[i0:], 2, c[:], 2, 1, 0) {
			v[i], v[i+1], v[i+2], v[i+3] = c[0], c[2], c[4], c[6]
			continue
		}
		for r := i; r < i+4; r++ {
			v[r] = dot(ui[r*p+r:r*p+p], s[r:])
		}
	}
	for ; i < p; i++ {
		v[i] = dot(ui[i*p+i:i*p+p], s[i:])
	}
}
