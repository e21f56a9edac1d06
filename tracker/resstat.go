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
// Cost: per refresh the Cholesky factor A + ε_R I = LLᵀ (O(p³/6)); per
// frame zᵀΩz = ‖L⁻¹z‖², one triangular solve, p²/2 multiply-adds
// (forward). Ωz = L⁻ᵀ(L⁻¹z) and the diagonal of Ω (O(p³/6), once per
// refresh) are formed only when they are read: every frame with the
// variance statistic, and for the RBC of R when they are asked for
// (ResidualContributionsTo, Config.RankResidual with R further over its
// limit than the index), from the factor and the frame they belong to.
// Storage 2p² + O(p) (two factors: the current one and the one of the
// last frame scored, which a refresh may have replaced), allocated in New;
// 3p² where the CPU has AVX2, each factor's lower triangle also kept in
// the packed layout that forward streams (packedLen).
type resStat struct {
	p            int
	res, vr      bool
	ridge, lam   float64
	gens         [2]resGen // the factor of the current model is gens[cur]
	cur          int
	panel        []float64
	zb           []float64 // [y; 0] (2 × p): y = L⁻¹z of the last frame scored, the zero row for rowKernel
	sb           []float64 // scratch of lowerSolve: 4 × resDiagBlock
	db           []float64 // scratch of diagOf: resDiagBlock × p
	v            []float64 // scratch: Ωz
	rbc          []float64 // RBC of R of the last frame scored (once settled)
	pending      bool      // rbc not yet formed for the last frame scored
	pgen         int       // the factor that scored it
	pdz          []float64 // its Dz
	pinc         []bool    // m.include when it was scored
	q, lvl       []float64 // variance EWMA and its normal level
	lvlN         []float64 // frames behind lvl (cumulative start)
	ok           bool
	nref         int // refreshes that gave a factor (the persistence weight pins one every few, persist.factor)
	dims         int
	lim, rbcLim  float64
	vlim, vg, vh float64
	zAlpha       float64 // z_{1−α} for the Wilson–Hilferty limit
}

// resGen is one factor of the residual statistic and what its RBC needs:
// L (row-major p × p, lower triangle), Dᵢᵢ and the channels of the model
// at that refresh, and, once formed (diag), Ωᵢᵢ and Mᵢᵢ = Ωᵢᵢ − Dᵢᵢ.
type resGen struct {
	l        []float64
	pk       []float64 // L's rows in blocks of eight for forward (packedLen; nil without the lane kernel)
	dd       []float64
	inc      []bool
	omd, mii []float64
	diag     bool
}

// resDiagBlock is the number of unit right-hand sides solved together for
// the diagonal of Ω (diagOf); even, as rowKernel takes its columns in pairs.
const resDiagBlock = 16

func newResStat(p int, cfg *Config) *resStat {
	if !cfg.Residual && !cfg.Variance && !cfg.Mewma && !cfg.Creep && cfg.LevelStep <= 0 {
		return nil
	}
	rs := &resStat{
		p: p, res: cfg.Residual, vr: cfg.Variance, ridge: cfg.ResidualRidge, lam: cfg.VarianceLambda,
		panel: make([]float64, p*cholBlock), v: make([]float64, p), zb: make([]float64, 2*p),
		sb: make([]float64, 4*resDiagBlock), db: make([]float64, resDiagBlock*p),
		rbc: make([]float64, p), pdz: make([]float64, p), pinc: make([]bool, p),
		q: make([]float64, p), lvl: make([]float64, p), lvlN: make([]float64, p),
	}
	for k := range rs.gens {
		rs.gens[k] = resGen{l: make([]float64, p*p), dd: make([]float64, p), inc: make([]bool, p),
			omd: make([]float64, p), mii: make([]float64, p)}
		if hasLaneKernel {
			rs.gens[k].pk = make([]float64, packedLen(p))
		}
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
// nothing to R. The factor goes into the slot not in use; the slot of the
// last frame scored is kept until its RBC is formed (settled first if a
// second refresh comes before another frame).
func (rs *resStat) refresh(m *model, alpha float64) {
	p := rs.p
	nxt := 1 - rs.cur
	if rs.pending && rs.pgen == nxt {
		rs.contributions()
	}
	g := &rs.gens[nxt]
	rs.ok = factorLower(g.l, g.pk, rs.panel, m.a.RawSymmetric(), p, rs.ridge)
	if !rs.ok {
		return
	}
	rs.cur = nxt
	rs.nref++
	copy(g.dd, m.base.dd)
	copy(g.inc, m.include)
	g.diag = false
	pin := 0
	for _, in := range m.include {
		if in {
			pin++
		}
	}
	rs.dims = max(pin-m.r, 1)
	rs.lim = limits.ChiSquare(1-alpha, float64(rs.dims))
	rs.vlim = rs.vg * limits.ChiSquare(1-alpha/float64(max(pin, 1)), rs.vh)
	if rs.vr {
		rs.diagOf(g)
	}
}

// packedOff is the offset in resGen.pk of the block of rows 8b…8b+7: the
// blocks before it hold 8·8b′ values each (their columns left of the
// block, b′ < b).
func packedOff(b int) int { return 32 * b * (b - 1) }

// packedLen is the length of resGen.pk for p channels: the rows 8b…8b+7
// of L, for each whole block of eight (b ≥ 1), over the columns 0…8b−1,
// stored as groups of four columns of the eight rows side by side (values
// j…j+3 of row r at 32·(j/4) + 4r), so that forward reads each block as
// one sequential stream (dotLanes8Packed).
func packedLen(p int) int { return packedOff(p / 8) }

// factorLower sets l to the lower Cholesky factor L of A + εI = LLᵀ
// (row-major p × p, A in the upper triangle of a; the upper triangle of l
// keeps U = Lᵀ, for the missing-data model, factorU): cholUpper
// gives U in place, then its transpose into the lower triangle, eight
// rows of L at a time (one cache line of each row of U read, eight rows of
// L written in order), and, when pk is not nil (packedLen(p) values),
// the same rows in forward's packed layout from the same reads. panel
// holds cholBlock·p values. It reports false when A + εI is not positive
// definite.
func factorLower(l, pk, panel []float64, a blas64.Symmetric, p int, ridge float64) bool {
	if !cholRidge(l, panel, a, p, ridge) {
		return false
	}
	i0 := 0
	for ; i0+8 <= p; i0 += 8 {
		r0, r1, r2, r3 := l[i0*p:i0*p+i0], l[(i0+1)*p:(i0+1)*p+i0], l[(i0+2)*p:(i0+2)*p+i0], l[(i0+3)*p:(i0+3)*p+i0]
		r4, r5, r6, r7 := l[(i0+4)*p:(i0+4)*p+i0], l[(i0+5)*p:(i0+5)*p+i0], l[(i0+6)*p:(i0+6)*p+i0], l[(i0+7)*p:(i0+7)*p+i0]
		for j := range r0 {
			u := l[j*p+i0 : j*p+i0+8]
			r0[j], r1[j], r2[j], r3[j] = u[0], u[1], u[2], u[3]
			r4[j], r5[j], r6[j], r7[j] = u[4], u[5], u[6], u[7]
		}
		if pk != nil && i0 > 0 {
			// The same eight rows into the packed block (packedLen):
			// columns j…j+3 of rows 0…7 side by side.
			blk := pk[packedOff(i0/8) : packedOff(i0/8)+8*i0]
			for j := 0; j < i0; j++ {
				u := l[j*p+i0 : j*p+i0+8]
				d := blk[(j>>2)*32+(j&3) : (j>>2)*32+32]
				d[0], d[4], d[8], d[12], d[16], d[20], d[24], d[28] = u[0], u[1], u[2], u[3], u[4], u[5], u[6], u[7]
			}
		}
		for i := i0 + 1; i < i0+8; i++ {
			for j := i0; j < i; j++ {
				l[i*p+j] = l[j*p+i]
			}
		}
	}
	for i := i0; i < p; i++ {
		for j := 0; j < i; j++ {
			l[i*p+j] = l[j*p+i]
		}
	}
	return true
}

// packLower writes the rows of L (the lower triangle of l, row-major
// p × p) into pk in forward's packed layout (packedLen), as factorLower
// does from the same values.
func packLower(pk, l []float64, p int) {
	for i0 := 8; i0+8 <= p; i0 += 8 {
		blk := pk[packedOff(i0/8) : packedOff(i0/8)+8*i0]
		for j := 0; j < i0; j++ {
			d := blk[(j>>2)*32+(j&3) : (j>>2)*32+32]
			for r := 0; r < 8; r++ {
				d[4*r] = l[(i0+r)*p+j]
			}
		}
	}
}

// factorU returns the current factor's buffer, whose upper triangle holds
// U = Lᵀ (row-major p × p), for the missing-data model when its ridge is
// ε_R (model.shareFactor). Valid until the next refresh but one.
func (rs *resStat) factorU() []float64 { return rs.gens[rs.cur].l }

// diagOf forms Ωᵢᵢ = ‖L⁻¹eᵢ‖² (the squared norm of column i of L⁻¹) and
// Mᵢᵢ = Ωᵢᵢ − Dᵢᵢ (0 for channels out of the model) of the factor g, by
// lowerSolve with resDiagBlock unit right-hand sides at a time (each zero
// before its own channel): Σᵢ (p − i)²/2 ≈ p³/6 multiply-adds.
func (rs *resStat) diagOf(g *resGen) {
	if g.diag {
		return
	}
	p, nb := rs.p, resDiagBlock
	y := rs.db
	for c := 0; c < p; c += nb {
		k := min(nb, p-c)
		for j := range y {
			y[j] = 0
		}
		for x := 0; x < k; x++ {
			y[x*p+c+x] = 1
		}
		lowerSolve(y, k, nb, g.l, p, c, rs.sb)
		for x := 0; x < k; x++ {
			i := c + x
			s := 0.0
			for _, v := range y[x*p+i : x*p+p] {
				s += v * v
			}
			g.omd[i] = s
			g.mii[i] = 0
			if g.inc[i] {
				g.mii[i] = s - g.dd[i]
			}
		}
	}
	g.diag = true
}

// lowerSolve solves L yₓ = bₓ in place for the nrhs right-hand sides held
// in the rows of y (row x at y[x·p:], each zero before c0), with L the
// lower triangle of l (row-major p × p): forward substitution in dot form
// (Golub & Van Loan, Matrix Computations, §3.1), four rows of L at a time
// — the dots of the four rows with the solved part of every yₓ by the
// AVX2/FMA kernel of the covariance update (rowKernel) where the CPU has
// it, then the 4 × 4 diagonal block by substitution. y holds ncol rows
// (ncol ≥ nrhs, even; rows nrhs…ncol−1 zero), s 4·ncol values. Cost
// nrhs·(p − c0)²/2 multiply-adds; no allocation.
func lowerSolve(y []float64, nrhs, ncol int, l []float64, p, c0 int, s []float64) {
	start := c0 &^ 3 // y is zero from here to c0: the kernel's length stays a multiple of 4
	s = s[:4*ncol]
	for r0 := start; r0 < p; r0 += 4 {
		r1 := min(r0+4, p)
		for j := range s {
			s[j] = 0
		}
		if r1 < r0+4 || !rowKernel(l[r0*p+start:], p, r0-start, y[start:], ncol, s, ncol, 1, 0) {
			for r := r0; r < r1; r++ {
				row := l[r*p+start : r*p+r0]
				for x := 0; x < nrhs; x++ {
					s[(r-r0)*ncol+x] = dot(row, y[x*p+start:])
				}
			}
		}
		for r := r0; r < r1; r++ {
			d := l[r*p+r]
			row := l[r*p+r0 : r*p+r]
			for x := 0; x < nrhs; x++ {
				yx := y[x*p : x*p+p]
				yx[r] = (yx[r] - s[(r-r0)*ncol+x] - dot(row, yx[r0:r])) / d
			}
		}
	}
}

// upperSolveT solves Lᵀv = y (L the lower triangle of l, row-major p × p)
// into v, by back substitution in column form (each step subtracts a
// multiple of row i of L, contiguous, from the unsolved part), four rows
// at a time: p²/2 multiply-adds, no allocation.
func upperSolveT(v, y, l []float64, p int) {
	copy(v[:p], y[:p])
	i := p - 1
	for ; i >= 0 && (i+1)%4 != 0; i-- {
		v[i] /= l[i*p+i]
		axpyTo(v[:i], -v[i], l[i*p:i*p+i])
	}
	for ; i >= 3; i -= 4 {
		// Rows i−3…i: finish the 4 × 4 block, then subtract all four rows.
		for r := i; r > i-4; r-- {
			v[r] /= l[r*p+r]
			for c := i - 3; c < r; c++ {
				v[c] -= v[r] * l[r*p+c]
			}
		}
		a0, a1, a2, a3 := v[i-3], v[i-2], v[i-1], v[i]
		r0, r1, r2, r3 := l[(i-3)*p:(i-3)*p+i-3], l[(i-2)*p:(i-2)*p+i-3], l[(i-1)*p:(i-1)*p+i-3], l[i*p:i*p+i-3]
		vv := v[:i-3]
		for c := range vv {
			vv[c] -= a0*r0[c] + a1*r1[c] + a2*r2[c] + a3*r3[c]
		}
	}
}

// score computes R and V for the standardized, imputed frame z, with dz = Dz
// and t2 from the scoring path; nMiss is the number of missing (imputed)
// channels, obs and stuck mark the channels seen in the frame. advance
// moves the variance EWMA (Step, not Evaluate) and learn also its normal
// levels. R needs only y = L⁻¹z; the RBC of R is left pending (settled by
// contributions) with what it needs: the factor's slot, Dz and the
// channels of the model.
func (rs *resStat) score(dst *Score, m *model, z, dz []float64, t2 float64, nMiss int, obs, stuck []bool, advance, learn bool) {
	dst.Residual, dst.ResidualLimit, dst.Variance, dst.VarianceLimit, dst.VarianceChannel = 0, 0, 0, 0, -1
	if !rs.ok || (!rs.res && !rs.vr) {
		return // not asked for (the factor serves the MEWMA or creep statistic alone)
	}
	p := rs.p
	g := &rs.gens[rs.cur]
	q := rs.forward(z[:p])
	if rs.res {
		r := max(q-t2, 0)
		dst.Residual = r
		dst.ResidualLimit = rs.lim
		if nMiss > 0 {
			dst.ResidualLimit = wilsonHilferty(float64(max(rs.dims-nMiss, 1)), rs.zAlpha)
		}
		rs.pending, rs.pgen = true, rs.cur
		copy(rs.pdz, dz[:p])
		copy(rs.pinc, m.include)
	}
	if rs.vr {
		v := rs.v
		upperSolveT(v, rs.zb, g.l, p)
		if rs.res {
			rs.settle(v)
		}
		best, bi := 0.0, -1
		for i := 0; i < p; i++ {
			if !m.include[i] || !obs[i] || stuck[i] || !(g.omd[i] > 0) {
				continue
			}
			ri := v[i] / math.Sqrt(g.omd[i])
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

// forward sets y = L⁻¹z (rs.zb[:p]) under the current factor and returns
// ‖y‖² = zᵀΩz: lowerSolve for one right-hand side, written out (the dots
// of four rows of L with the solved part of y by rowKernel, its zero
// second column the row rs.zb[p:], then the 4 × 4 diagonal block). Where
// the CPU has AVX2, eight rows of L per pass over y (dotLanes8Packed, on
// the factor's packed copy: one sequential stream per eight rows) with
// the same sums in the same order: the same bits
// (TestForwardLanesSameBits).
func (rs *resStat) forward(z []float64) float64 { return rs.forwardIn(rs.zb, z) }

// forwardIn is forward with the buffer b (2p values) in place of rs.zb:
// y = L⁻¹z in b[:p], b[p:] zeroed.
func (rs *resStat) forwardIn(b, z []float64) float64 { return rs.forwardGen(&rs.gens[rs.cur], b, z) }

// forwardGen is forwardIn under the factor g (a slot of rs, or a copy of
// one with its packed rows, persist.factor).
func (rs *resStat) forwardGen(g *resGen, b, z []float64) float64 {
	p := rs.p
	l := g.l
	b = b[:2*p]
	y := b[:p]
	copy(y, z)
	for j := range b[p:] {
		b[p+j] = 0
	}
	q := 0.0
	r0 := 0
	if pk := g.pk; hasLaneKernel && pk != nil {
		// Eight rows per pass (dotLanes8Packed): the lane sums of
		// rowKernel over y[:r0], reduced as it reduces them for rows r0…r0+3 and carried
		// on over y[r0:r0+4] (one more fused multiply-add per lane, as
		// rowKernel's next pass would add) for rows r0+4…r0+7: the same
		// numbers in the same order, half the passes over y.
		var acc [32]float64 // zero for the first block (no columns left of it); then all written by the kernel
		for ; r0+8 <= p; r0 += 8 {
			if r0 > 0 {
				dotLanes8Packed(pk[packedOff(r0/8):packedOff(r0/8)+8*r0], r0, y, acc[:])
			}
			q += forward4c(l, p, r0, y, laneSum(acc[0:4]), laneSum(acc[4:8]), laneSum(acc[8:12]), laneSum(acc[12:16]))
			var c [4]float64
			y0, y1, y2, y3 := y[r0], y[r0+1], y[r0+2], y[r0+3]
			for r := range c {
				a := acc[16+4*r : 20+4*r]
				row := l[(r0+4+r)*p+r0 : (r0+4+r)*p+r0+4]
				c[r] = ((math.FMA(row[0], y0, a[0]) + math.FMA(row[1], y1, a[1])) +
					(math.FMA(row[2], y2, a[2]) + math.FMA(row[3], y3, a[3]))) + 0
			}
			q += forward4c(l, p, r0+4, y, c[0], c[1], c[2], c[3])
		}
	}
	for ; r0+4 <= p; r0 += 4 {
		var c [8]float64
		if !rowKernel(l[r0*p:], p, r0, b, 2, c[:], 2, 1, 0) {
			for r := 0; r < 4; r++ {
				c[2*r] = dot(l[(r0+r)*p:(r0+r)*p+r0], y)
			}
		}
		q += forward4(l, p, r0, y, &c)
	}
	for r := r0; r < p; r++ {
		y[r] = (y[r] - dot(l[r*p:r*p+r], y)) / l[r*p+r]
		q += y[r] * y[r]
	}
	return q
}

// forward4 solves rows r0…r0+3 of L y = z in place in y, the dots of those
// rows with y[:r0] given in c[0], c[2], c[4], c[6] (rowKernel's layout),
// and returns the block's part of ‖y‖².
func forward4(l []float64, p, r0 int, y []float64, c *[8]float64) float64 {
	return forward4c(l, p, r0, y, c[0], c[2], c[4], c[6])
}

// forward4c is forward4 with the four dots c0…c3 as values.
func forward4c(l []float64, p, r0 int, y []float64, c0, c1, c2, c3 float64) float64 {
	l0, l1, l2, l3 := l[r0*p+r0:r0*p+r0+1], l[(r0+1)*p+r0:(r0+1)*p+r0+2], l[(r0+2)*p+r0:(r0+2)*p+r0+3], l[(r0+3)*p+r0:(r0+3)*p+r0+4]
	y0 := (y[r0] - c0) / l0[0]
	y1 := (y[r0+1] - c1 - l1[0]*y0) / l1[1]
	y2 := (y[r0+2] - c2 - (l2[0]*y0 + l2[1]*y1)) / l2[2]
	y3 := (y[r0+3] - c3 - (l3[0]*y0 + l3[1]*y1 + l3[2]*y2)) / l3[3]
	y[r0], y[r0+1], y[r0+2], y[r0+3] = y0, y1, y2, y3
	return (y0*y0 + y1*y1) + (y2*y2 + y3*y3)
}

// laneSum reduces four lane sums as rowKernel does: (a₀ + a₁) + (a₂ + a₃),
// then β·c + s with β = c = 0, which is s + 0 (so −0 becomes +0).
func laneSum(a []float64) float64 {
	return ((a[0] + a[1]) + (a[2] + a[3])) + 0
}

// contributions returns the RBC of R of the last frame scored, forming it
// first if it is pending: Ωz = L⁻ᵀy under the factor that scored the frame
// (the y of that frame is still in rs.zb), and Ωᵢᵢ of that factor if not
// yet formed.
func (rs *resStat) contributions() []float64 {
	if rs.pending {
		upperSolveT(rs.v, rs.zb, rs.gens[rs.pgen].l, rs.p)
		rs.settle(rs.v)
	}
	return rs.rbc
}

// settle forms the RBC of R of the pending frame from v = Ωz:
// RBCᵢ = ((Ωz)ᵢ − (Dz)ᵢ)²/Mᵢᵢ.
func (rs *resStat) settle(v []float64) {
	g := &rs.gens[rs.pgen]
	rs.diagOf(g)
	for i := 0; i < rs.p; i++ {
		rs.rbc[i] = 0
		if mi := g.mii[i]; mi > 0 && rs.pinc[i] {
			d := v[i] - rs.pdz[i]
			rs.rbc[i] = d * d / mi
		}
	}
	rs.pending = false
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
	copy(dst, t.rs.contributions())
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

// omegaTimes sets v = Ωz (len p each) under the current factor:
// y = L⁻¹z (forward), then v = L⁻ᵀy (upperSolveT). It overwrites the y of
// the last frame scored: only for tests.
func (rs *resStat) omegaTimes(v, z []float64) {
	rs.forward(z)
	upperSolveT(v, rs.zb, rs.gens[rs.cur].l, rs.p)
}
