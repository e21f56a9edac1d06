package tracker

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// work is the per-frame scratch of the scoring path (sized in New).
type work struct {
	z, e, dz, rbc, spec, t2c, imp []float64 // p
	y                             []float64 // maxR
	tq                            []float64 // 2·maxR
	miss                          []int     // current missing pattern
}

func newWork(p, maxR int) *work {
	return &work{
		z: make([]float64, p), e: make([]float64, p), dz: make([]float64, p),
		rbc: make([]float64, p), spec: make([]float64, p), t2c: make([]float64, p),
		imp:  make([]float64, p),
		y:    make([]float64, maxR),
		tq:   make([]float64, 2*maxR),
		miss: make([]int, 0, p),
	}
}

// impute replaces the missing entries of z (which must be zero on entry) by
// their conditional expectation given the observed ones, ẑ_m = H z: one
// matrix–vector product, |m|·p multiply-adds (gonum's blas64.Gemv, which
// allocates nothing).
func (m *model) impute(z []float64, pt *pattern, tmp []float64) {
	p, k := m.p, len(pt.miss)
	if k == 0 {
		return
	}
	blas64.Gemv(blas.NoTrans, 1, blas64.General{Rows: k, Cols: p, Stride: p, Data: pt.h[:k*p]},
		blas64.Vector{N: p, Inc: 1, Data: z[:p]}, 0, blas64.Vector{N: k, Inc: 1, Data: tmp[:k]})
	for x, i := range pt.miss {
		z[i] = tmp[x]
	}
}

// scoreZ scores the standardized (and imputed) frame in w.z under pattern
// pt: T², SPE, φ and the per-channel SPE contributions e², T² contributions
// zᵢ(D'z)ᵢ and RBCs. O(p + nnz·(r + rq)) with nnz the channels with a
// nonzero row of P or Q (m.act): a channel outside every mode has e = z,
// D'z = 0.
func (m *model) scoreZ(w *work, pt *pattern, rbc Index) (t2, spe, phi float64) {
	p, r, rq := m.p, m.r, m.rq
	z := w.z
	nw := r + rq
	t2 = m.modeScores(w, pt)
	act := m.act
	pq := m.pq[:len(act)*nw]
	qv, y := w.tq[r:nw], w.y[:r]
	tau2, delta2 := pt.t2Lim, pt.speLim
	// The RBC numerator is (Mz)ᵢ with M = Φ = D/τ² + C̃/δ² or M = C̃.
	cd, ce := 1/tau2, 1/delta2
	if rbc == IndexSPE {
		cd, ce = 0, 1
	}
	spe = 0
	zz := z[:p]
	dzv, ev, spec, t2c, rbcv, inv := w.dz[:p], w.e[:p], w.spec[:p], w.t2c[:p], w.rbc[:p], pt.rbcInv[:p]
	next, a := p, 0
	if len(act) > 0 {
		next = act[0]
	}
	for i, zi := range zz {
		dz, e := 0.0, zi
		if i == next {
			row := pq[a*nw : a*nw+nw]
			pr, qr := row[:r], row[r:]
			for j, v := range pr {
				dz += v * y[j]
			}
			for j, v := range qr {
				e -= v * qv[j]
			}
			a++
			next = p
			if a < len(act) {
				next = act[a]
			}
		}
		dzv[i] = dz
		ev[i] = e
		spec[i] = e * e
		t2c[i] = zi * dz
		spe += e * e
		v := cd*dz + ce*e
		rbcv[i] = v * v * inv[i]
	}
	phi = spe/delta2 + t2/tau2
	return t2, spe, phi
}

// modeScores sets w.tq = [Pᵀz | Qᵀz] (from the active rows) and w.y = M'⁺t
// for the frame in w.z under pattern pt, and returns T² = tᵀM'⁺t: the part
// of scoreZ and phiZ before the per-channel loop.
func (m *model) modeScores(w *work, pt *pattern) (t2 float64) {
	return m.modeScoresOf(w.z, w.tq, w.y, pt)
}

// modeScoresOf is modeScores for the vector z (len p) with the scratch
// tq (2·maxR) and y (maxR) given: tq = [Pᵀz | Qᵀz], y = M'⁺t, T² = tᵀy.
func (m *model) modeScoresOf(z, tqs, ys []float64, pt *pattern) (t2 float64) {
	R, r, rq := m.maxR, m.r, m.rq
	nw := r + rq
	tq := tqs[:nw]
	for j := range tq {
		tq[j] = 0
	}
	act := m.act
	pq := m.pq[:len(act)*nw]
	for a, i := range act {
		zi := z[i]
		if zi == 0 {
			continue
		}
		row := pq[a*nw : a*nw+nw]
		for j, v := range row {
			tq[j] += v * zi
		}
	}
	tv := tq[:r]
	y := ys[:r]
	for a := 0; a < r; a++ {
		mr := pt.minv[a*R : a*R+r]
		s := 0.0
		for b, v := range mr {
			s += v * tv[b]
		}
		y[a] = s
		t2 += tv[a] * s
	}
	return t2
}

// lookupPattern returns the pattern for the missing set miss: from the
// cache when seen since the refresh, else computed into a preallocated
// cache slot (round-robin replacement once all cacheMax slots are used).
// At the first incomplete frame after a refresh it factors A + εI.
func (m *model) lookupPattern(miss []int, ls *limitSpec, ridge float64, cacheMax int) (*pattern, error) {
	if len(miss) == 0 {
		return m.base, nil
	}
	for _, pt := range m.slots[:m.nCache] {
		if slices.Equal(pt.miss, miss) {
			return pt, nil
		}
	}
	if !m.cholOK {
		if err := m.factorRidge(ridge); err != nil {
			return nil, err
		}
	}
	var pt *pattern
	switch {
	case cacheMax <= 0:
		pt = m.scratchSlot() // not cached
	case m.nCache < cacheMax && m.nCache < len(m.slots):
		pt = m.slots[m.nCache]
		m.nCache++
	default:
		n := min(cacheMax, len(m.slots))
		pt = m.slots[m.next%n]
		m.next = (m.next + 1) % n
	}
	pt.setMiss(miss, m.p)
	if err := m.conditional(pt, ridge); err != nil {
		// Leave the slot unusable for lookups until it is rewritten.
		pt.miss = append(pt.miss[:0], -1)
		return nil, err
	}
	m.computePattern(pt, ls)
	return pt, nil
}

// scratchSlot is the slot used when caching is off.
func (m *model) scratchSlot() *pattern {
	if m.scratch == nil {
		m.scratch = m.newPattern(patternPrealloc)
	}
	return m.scratch
}

// factorRidge forms the upper Cholesky factor U of A + εI = UᵀU in place in
// the p × p buffer m.chol (row-major, upper triangle), by cholUpper:
// O(p³/6) multiply-adds, once per refresh at the first incomplete frame.
// The buffers (p² + 16p values) are allocated the first time in the
// tracker's life that a frame has missing channels; after that the
// factorization allocates nothing.
func (m *model) factorRidge(ridge float64) error {
	p := m.p
	if m.own == nil {
		m.own = make([]float64, p*p)
	}
	if m.panel == nil {
		m.panel = make([]float64, p*cholBlock)
	}
	m.chol = m.own
	if !cholRidge(m.chol, m.panel, m.a.RawSymmetric(), p, ridge) {
		return fmt.Errorf("tracker: missing-data model: correlation + %g·I is not positive definite", ridge)
	}
	m.cholOK = true
	return nil
}

// cholRidge sets the upper triangle of u (row-major p × p) to the upper
// Cholesky factor U of A + εI, A in the upper triangle of a (cholUpper;
// the strict lower triangle of u is left as it was). panel holds
// cholBlock·p values. It reports false when A + εI is not positive
// definite. The one factorization of the missing-data model
// (factorRidge), the residual statistic (factorLower) and the relation
// modes (factorInverse).
func cholRidge(u, panel []float64, a blas64.Symmetric, p int, ridge float64) bool {
	for i := 0; i < p; i++ {
		copy(u[i*p+i:i*p+p], a.Data[i*a.Stride+i:i*a.Stride+p])
		u[i*p+i] += ridge
	}
	return cholUpper(u, p, p, panel)
}

// shareFactor takes u (row-major p × p, its upper triangle the factor U of
// A + εI of the current A, with the ridge ε of factorRidge) as the
// missing-data model's factor until the next refresh, so that a frame with
// missing channels needs no factorization of its own: the residual
// statistic's factor when its ridge is the same (Tracker.install). u is
// only read; factorRidge never writes into it.
func (m *model) shareFactor(u []float64) {
	if m.panel == nil {
		m.panel = make([]float64, m.p*cholBlock)
	}
	m.chol = u
	m.cholOK = true
}

// cholBlock is the panel width of cholUpper (a multiple of 4); wide panels
// leave more to the row-by-row panel updates. The widths measured are in
// the package README.
const cholBlock = 16

// cholUpper factors the symmetric positive definite n × n matrix held in
// the upper triangle of a (row-major, stride lda) in place, a = UᵀU, by the
// right-looking blocked Cholesky algorithm (Golub & Van Loan, Matrix
// Computations, §4.2): for each panel of cholBlock rows, factor the rows
// (U_rr = √a_rr, the row divided by U_rr, the later panel rows updated
// with it by blas64.Axpy), then update the trailing block A₂₂ ← A₂₂ − U₁₂ᵀU₁₂:
// in outer-product form straight from the panel rows where the CPU has
// AVX2/FMA (trailingUpdate), else with the rank-update kernel (rankUpdate,
// α = −1) on the panel transposed into buf (n × cholBlock). It reports
// false if a pivot is not positive.
//
// Where the CPU has AVX2 the panel rows are finished one pass each
// (panelRow: the updates of the panel rows above, then the scaling), and
// with AVX-512F the trailing updates of a group of panelGroup panels are
// deferred and applied in one pass over the rows past the group
// (trailingRowsN; a panel inside the group gets those of the group's
// earlier panels just before it is factored). Each value then sees the same operations in the
// same order as above, so the factor has the same bits either way
// (TestCholUpperPanelKernelSameBits); only the passes over memory differ.
func cholUpper(a []float64, n, lda int, buf []float64) bool {
	var offs [cholBlock]int
	var coef [cholBlock]float64
	g0 := 0 // the first panel of the group whose trailing updates are deferred (hasMultiPanel)
	for k0 := 0; k0 < n; k0 += cholBlock {
		k1 := min(k0+cholBlock, n)
		if hasMultiPanel && k0 > g0 {
			trailingRowsN(a, lda, n, g0, cholBlock, (k0-g0)/cholBlock, k0, k1)
		}
		for r := k0; r < k1; r++ {
			if hasPanelKernel {
				// Row r gets the updates of the panel rows above it in
				// one pass (left-looking), then its scaling: the same
				// products, subtractions and scaling, in the same order,
				// as the Axpy of each of those rows and the Scal below.
				cnt := 0
				for q := k0; q < r; q++ {
					if v := a[q*lda+r]; v != 0 {
						offs[cnt], coef[cnt] = (q-r)*lda, v
						cnt++
					}
				}
				d := a[r*lda+r]
				for c, o := range offs[:cnt] {
					d -= float64(coef[c] * a[r*lda+r+o])
				}
				if !(d > 0) {
					return false
				}
				d = math.Sqrt(d)
				a[r*lda+r] = d
				panelRow(a, r*lda+r+1, n-r-1, offs[:cnt], coef[:cnt], 1/d)
				continue
			}
			d := a[r*lda+r]
			if !(d > 0) {
				return false
			}
			d = math.Sqrt(d)
			a[r*lda+r] = d
			row := a[r*lda+r+1 : r*lda+n]
			if len(row) > 0 {
				blas64.Scal(1/d, blas64.Vector{N: len(row), Inc: 1, Data: row})
			}
			for s := r + 1; s < k1; s++ {
				v := a[r*lda+s]
				if v == 0 {
					continue
				}
				src := a[r*lda+s : r*lda+n]
				dst := a[s*lda+s : s*lda+n]
				blas64.Axpy(-v, blas64.Vector{N: len(src), Inc: 1, Data: src}, blas64.Vector{N: len(src), Inc: 1, Data: dst})
			}
		}
		if k1 == n {
			break
		}
		if hasMultiPanel {
			// The rows past a group of panelGroup panels get the group's
			// updates in one pass once its last panel is factored; a
			// panel inside the group gets those of the group's earlier
			// panels just before it is factored (above). Each value sees
			// the panels' updates in the same order: the same bits.
			if (k1-g0)/cholBlock == panelGroup {
				trailingRowsN(a, lda, n, g0, cholBlock, panelGroup, k1, n)
				g0 = k1
			}
			continue
		}
		if trailingUpdate(a, lda, n, k0, k1) {
			continue
		}
		rest, kk := n-k1, k1-k0
		kp := roundUp4(kk)
		for l := 0; l < kk; l++ {
			src := a[(k0+l)*lda+k1 : (k0+l)*lda+n]
			for i, v := range src {
				buf[i*cholBlock+l] = v
			}
		}
		for i := 0; i < rest; i++ {
			for l := kk; l < kp; l++ {
				buf[i*cholBlock+l] = 0
			}
		}
		rankUpdate(rest, kp, buf, cholBlock, -1, 1, a[k1*lda+k1:], lda)
	}
	return true
}

// cholLower factors the symmetric positive definite n × n matrix held in
// the lower triangle of a (row-major, stride lda) in place, a = LLᵀ
// (Cholesky–Crout by rows, each entry one contiguous dot product):
//
//	Lᵢⱼ = (aᵢⱼ − Σ_{k<j} LᵢₖLⱼₖ)/Lⱼⱼ,   Lᵢᵢ = √(aᵢᵢ − Σ_{k<i} Lᵢₖ²)
//
// It reports false if a pivot is not positive (a not positive definite).
// Used for the small blocks Ω_mm.
func cholLower(a []float64, n, lda int) bool {
	for i := 0; i < n; i++ {
		ri := a[i*lda : i*lda+i+1]
		for j := 0; j < i; j++ {
			rj := a[j*lda : j*lda+j+1]
			ri[j] = (ri[j] - dot(ri[:j], rj[:j])) / rj[j]
		}
		d := ri[i] - dot(ri[:i], ri[:i])
		if !(d > 0) {
			return false
		}
		ri[i] = math.Sqrt(d)
	}
	return true
}

// conditional fills the conditional-expectation operator H (|m| × p) and
// the conditional covariance K (|m| × |m|) of the missing channels given the
// observed ones, under the regularised model A + εI (Gaussian conditioning
// via the precision matrix Ω = (A + εI)⁻¹; the reconstruction of Dunia &
// Qin 1998 along the missing channels' directions):
//
//	K = (Ω_mm)⁻¹ − εI,   ẑ_m = −(Ω_mm)⁻¹ Ω_mo z_o = H z  (z_m = 0)
//
// The rows Ω_{m,:} come from the factor of factorRidge by two triangular
// solves with |m| right-hand sides (precisionRows), so Ω is never formed;
// Ω_mm is factored by cholLower, Ω_mm = LLᵀ, and H = −L⁻ᵀL⁻¹Ω_{m,:} is
// solved in place row by row (each row of H a combination of whole rows
// of p values). The per-frame cost of the reconstruction is then the
// product H z, |m|·p multiply-adds (impute). Cost per pattern and refresh
// O(|m|p² + |m|²p + |m|³); all storage is the pattern's (preallocated, see
// newPattern).
func (m *model) conditional(pt *pattern, ridge float64) error {
	return m.conditionalOf(pt, m.chol, m.panel, ridge)
}

// conditionalOf is conditional with the rows Ω_{m,:} taken from u, the
// upper Cholesky factor of A + εI for this ε = ridge (row-major p × p,
// upper triangle), panel its cholBlock·p scratch (learnPattern passes the
// residual statistic's factor).
func (m *model) conditionalOf(pt *pattern, u, panel []float64, ridge float64) error {
	k, p := len(pt.miss), m.p
	h := pt.h[:k*p]
	precisionRowsOf(h, pt.miss, u, p, panel)
	// Ω_mm into the pattern's fac and its Cholesky factor (lower) there.
	fac := pt.fac[:k*k]
	for x := 0; x < k; x++ {
		for y, iy := range pt.miss {
			fac[x*k+y] = h[x*p+iy]
		}
	}
	if !cholLower(fac, k, k) {
		return fmt.Errorf("tracker: missing-data model: precision block not positive definite")
	}
	// H = −(Ω_mm)⁻¹ Ω_{m,:}: L Z = Ω_{m,:}, then Lᵀ X = Z, by rows in place;
	// zero on the missing columns.
	for x := 0; x < k; x++ {
		hx := h[x*p : (x+1)*p]
		for y := 0; y < x; y++ {
			if l := fac[x*k+y]; l != 0 {
				axpyTo(hx, -l, h[y*p:(y+1)*p])
			}
		}
		d := fac[x*k+x]
		for j := range hx {
			hx[j] /= d
		}
	}
	for x := k - 1; x >= 0; x-- {
		hx := h[x*p : (x+1)*p]
		for y := x + 1; y < k; y++ {
			if l := fac[y*k+x]; l != 0 {
				axpyTo(hx, -l, h[y*p:(y+1)*p])
			}
		}
		d := fac[x*k+x]
		for j := range hx {
			hx[j] /= d
		}
	}
	for j := range h {
		h[j] = -h[j]
	}
	for _, i := range pt.miss {
		for x := 0; x < k; x++ {
			h[x*p+i] = 0
		}
	}
	// K̃ = (Ω_mm)⁻¹ from the unit columns, then K = K̃ − εI.
	v := pt.tmp[:k]
	kc := pt.kc[:k*k]
	for y := 0; y < k; y++ {
		for x := range v {
			v[x] = 0
		}
		v[y] = 1
		for x := 0; x < k; x++ { // L u = v
			v[x] = (v[x] - dot(fac[x*k:x*k+x], v[:x])) / fac[x*k+x]
		}
		for x := k - 1; x >= 0; x-- { // Lᵀ w = u
			w := v[x] / fac[x*k+x]
			v[x] = w
			for y := 0; y < x; y++ {
				v[y] -= fac[x*k+y] * w
			}
		}
		for x := 0; x < k; x++ {
			kc[x*k+y] = v[x]
		}
	}
	for x := 0; x < k; x++ {
		kc[x*k+x] = math.Max(kc[x*k+x]-ridge, 0)
	}
	return nil
}

// axpyTo adds a·x to dst (len(x) ≥ len(dst)) with gonum's blas64.Axpy.
func axpyTo(dst []float64, a float64, x []float64) {
	n := len(dst)
	blas64.Axpy(a, blas64.Vector{N: n, Inc: 1, Data: x[:n]}, blas64.Vector{N: n, Inc: 1, Data: dst})
}
