package tracker

import (
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/limits"
)

// model is the monitoring model held between refreshes: the correlation A
// of the standardized channels at the last refresh, the loadings P (p × r),
// an orthonormal basis Q of span(P), and per missing-channel pattern the
// quantities the scores, limits and contributions need.
//
// With z the standardized frame (z ~ N(0, S) in control, S = A when every
// channel is observed):
//
//	t = Pᵀz,  M = PᵀSP,  T² = tᵀM⁻¹t ~ χ²(r)      (non-orthogonal P allowed)
//	e = (I − QQᵀ)z = (I − P(PᵀP)⁻¹Pᵀ)z,  SPE = ‖e‖²
//	φ = SPE/δ² + T²/τ²  (Yue & Qin 2001)
type model struct {
	p, r, rq int // channels, modes, rank of span(P)
	maxR     int

	a       *mat.SymDense // correlation at the last refresh (p × p)
	include []bool        // channels in the model (not excluded)
	aFro2   float64       // ‖A‖²_F
	trA     float64

	pl  []float64 // P, p × maxR row-major (stride maxR)
	q   []float64 // Q, p × maxR
	ap  []float64 // A·P
	aq  []float64 // A·Q
	qaq []float64 // QᵀAQ, maxR × maxR
	m   []float64 // PᵀAP
	ctd []float64 // C̃ᵢᵢ = 1 − ‖Qᵢ‖²

	// Scoring layout: the channels whose row of P or Q is nonzero (all of
	// them for dense modes, the union of the supports for sparse ones) and
	// their rows [Pᵢ | Qᵢ] packed contiguously (len(act) × (r + rq)).
	act []int
	pq  []float64

	// Mode membership per channel: modeIDs[modeOff[i]:modeOff[i+1]].
	modeOff []int
	modeIDs []int

	nEff float64

	base    *pattern   // no channel missing
	slots   []*pattern // preallocated cache slots for missing patterns
	nCache  int        // slots in use since the refresh
	next    int        // round-robin replacement among the slots
	scratch *pattern   // the slot used when caching is off

	chol   []float64 // upper Cholesky factor of A + εI (p × p, upper triangle): own, or the residual statistic's (shareFactor)
	own    []float64 // chol's own buffer, allocated at the first incomplete frame that needs it
	panel  []float64 // p × cholBlock scratch of cholUpper
	cholOK bool      // chol is the factor of the current A

	learn learnCache // patterns of masked learning on the residual statistic's factor (learnPattern)

	// scratch (maxR-sized)
	sc1, sc2, sc3, eig []float64
	ev                 []float64
}

// pattern holds what scoring needs for one set of missing channels.
type pattern struct {
	miss []int     // missing channels (sorted)
	h    []float64 // |m| × p: ẑ_m = H z with z_m = 0 (conditional expectation)
	kc   []float64 // |m| × |m| conditional covariance K = A_{m|o}
	fac  []float64 // |m| × |m| Cholesky factor of Ω_mm (scratch of conditional)
	tmp  []float64 // |m| scratch

	minv   []float64 // pseudo-inverse of M' = PᵀS'P, maxR × maxR
	rank   int       // rank of M'
	theta  limits.Theta
	cross  float64 // tr(S'D'S'C̃) (zero for eigenvector loadings)
	t2Lim  float64
	speLim float64
	phiLim float64
	dd     []float64 // D'ᵢᵢ = Pᵢ M'⁺ Pᵢᵀ
	rbcInv []float64 // 1/Mᵢᵢ of the RBC index matrix (C̃ or Φ); 0: channel not ranked
	rbcLim []float64 // gᵢ·χ²_{1−α}(1)
	err    error
}

// patternPrealloc is the number of missing channels per pattern for which a
// cache slot is preallocated (H: patternPrealloc·p values, K and the factor
// patternPrealloc² each). A pattern with more missing channels grows its
// slot once (an allocation); the slot keeps the larger buffers.
const patternPrealloc = 16

// emptyResidual is the residual trace θ₁, relative to the trace of the
// included correlation matrix, below which the residual subspace counts as
// empty (rounding only, about 1e-16 per channel in practice).
const emptyResidual = 1e-12

func newModel(p, maxR, slots int) *model {
	m := &model{
		p: p, maxR: maxR,
		a:       mat.NewSymDense(p, nil),
		include: make([]bool, p),
		pl:      make([]float64, p*maxR), q: make([]float64, p*maxR),
		ap: make([]float64, p*maxR), aq: make([]float64, p*maxR),
		qaq: make([]float64, maxR*maxR), m: make([]float64, maxR*maxR),
		ctd: make([]float64, p),
		act: make([]int, 0, p), pq: make([]float64, 2*p*maxR),
		modeOff: make([]int, p+1),
		modeIDs: make([]int, 0, p*maxR),
		sc1:     make([]float64, maxR*maxR), sc2: make([]float64, maxR*maxR),
		sc3: make([]float64, maxR*maxR), eig: make([]float64, maxR*maxR), ev: make([]float64, maxR),
	}
	m.base = m.newPattern(0)
	m.slots = make([]*pattern, slots)
	for i := range m.slots {
		m.slots[i] = m.newPattern(min(p, patternPrealloc))
	}
	return m
}

// newPattern returns a pattern with storage for up to k missing channels.
func (m *model) newPattern(k int) *pattern {
	return &pattern{
		miss: make([]int, 0, k), h: make([]float64, roundUp4(k)*m.p), kc: make([]float64, k*k),
		fac: make([]float64, k*k), tmp: make([]float64, k),
		minv: make([]float64, m.maxR*m.maxR),
		dd:   make([]float64, m.p), rbcInv: make([]float64, m.p), rbcLim: make([]float64, m.p),
	}
}

// setMiss sets the pattern's missing set, growing its storage if it holds
// more channels than the slot was sized for.
func (pt *pattern) setMiss(miss []int, p int) {
	k := len(miss)
	if cap(pt.miss) < k {
		pt.miss = make([]int, 0, k)
	}
	pt.miss = append(pt.miss[:0], miss...)
	if len(pt.h) < roundUp4(k)*p { // precisionRows pads to a multiple of 4 rows
		pt.h = make([]float64, roundUp4(k)*p)
	}
	if len(pt.kc) < k*k {
		pt.kc = make([]float64, k*k)
		pt.fac = make([]float64, k*k)
	}
	if len(pt.tmp) < k {
		pt.tmp = make([]float64, k)
	}
}

// limitSpec is what a model needs to set its limits.
type limitSpec struct {
	alpha   float64
	t2      T2Form
	spe     SPEForm
	rbc     Index
	nEff    float64 // effective sample size for the F form
	chi1    float64 // χ²_{1−α}(1)
	jmSpace *jmScratch
}

// setLoadings copies the loadings P (p × r) into the model, orthonormalises
// them by modified Gram–Schmidt (columns dependent within 1e-10 are
// dropped) and computes AP, AQ, QᵀAQ, PᵀAP and C̃ᵢᵢ. a must already hold A.
func (m *model) setLoadings(pm mat.Matrix) {
	p, R := m.p, m.maxR
	_, r := pm.Dims()
	m.r = r
	for i := 0; i < p; i++ {
		for j := 0; j < r; j++ {
			m.pl[i*R+j] = pm.At(i, j)
		}
	}
	rq := m.orthonormalise(r)
	m.rq = rq
	a := m.a.RawSymmetric()
	pg := blas64.General{Rows: p, Cols: R, Stride: R, Data: m.pl}
	qg := blas64.General{Rows: p, Cols: R, Stride: R, Data: m.q}
	// AP column by column from the nonzero loadings only: O(p·nnz(P)), so
	// k-sparse modes cost O(p·k·r) instead of O(p²r).
	m.symTimesSparse(m.ap, m.pl, r)
	if rq == r {
		m.aqFromAP(r)
	} else {
		m.symTimesSparse(m.aq, m.q, rq)
	}
	blas64.Gemm(blas.Trans, blas.NoTrans, 1, qg, blas64.General{Rows: p, Cols: R, Stride: R, Data: m.aq}, 0,
		blas64.General{Rows: R, Cols: R, Stride: R, Data: m.qaq})
	blas64.Gemm(blas.Trans, blas.NoTrans, 1, pg, blas64.General{Rows: p, Cols: R, Stride: R, Data: m.ap}, 0,
		blas64.General{Rows: R, Cols: R, Stride: R, Data: m.m})
	for i := 0; i < p; i++ {
		s := 0.0
		for j := 0; j < rq; j++ {
			s += m.q[i*R+j] * m.q[i*R+j]
		}
		m.ctd[i] = math.Max(1-s, 0)
	}
	m.act = m.act[:0]
	w := r + rq
	for i := 0; i < p; i++ {
		nz := false
		for j := 0; j < r && !nz; j++ {
			nz = m.pl[i*R+j] != 0
		}
		for j := 0; j < rq && !nz; j++ {
			nz = m.q[i*R+j] != 0
		}
		if !nz {
			continue
		}
		row := m.pq[len(m.act)*w : (len(m.act)+1)*w]
		copy(row[:r], m.pl[i*R:i*R+r])
		copy(row[r:], m.q[i*R:i*R+rq])
		m.act = append(m.act, i)
	}
	m.aFro2, m.trA = 0, 0
	for i := 0; i < p; i++ {
		row := a.Data[i*a.Stride+i : i*a.Stride+p]
		m.trA += row[0]
		m.aFro2 += row[0]*row[0] + 2*floats.Dot(row[1:], row[1:])
	}
	m.nCache = 0
	m.next = 0
	m.cholOK = false
	m.learn.n, m.learn.next = 0, 0
}

// orthonormalise writes into the first columns of q the first r loadings
// of pl orthonormalised by modified Gram–Schmidt (two passes; a column
// dependent within 1e-10 of its norm is dropped), zeroes the rest of q and
// returns the number of columns kept.
func (m *model) orthonormalise(r int) int {
	p, R := m.p, m.maxR
	rq := 0
	for j := 0; j < r; j++ {
		for i := 0; i < p; i++ {
			m.q[i*R+rq] = m.pl[i*R+j]
		}
		for pass := 0; pass < 2; pass++ {
			for k := 0; k < rq; k++ {
				d := 0.0
				for i := 0; i < p; i++ {
					d += m.q[i*R+k] * m.q[i*R+rq]
				}
				for i := 0; i < p; i++ {
					m.q[i*R+rq] -= d * m.q[i*R+k]
				}
			}
		}
		nrm := 0.0
		for i := 0; i < p; i++ {
			nrm += m.q[i*R+rq] * m.q[i*R+rq]
		}
		col := 0.0
		for i := 0; i < p; i++ {
			col += m.pl[i*R+j] * m.pl[i*R+j]
		}
		if nrm <= 1e-20*col || nrm == 0 {
			continue
		}
		nrm = 1 / math.Sqrt(nrm)
		for i := 0; i < p; i++ {
			m.q[i*R+rq] *= nrm
		}
		rq++
	}
	for i := 0; i < p; i++ {
		for j := rq; j < R; j++ {
			m.q[i*R+j] = 0
		}
	}
	return rq
}

// aqFromAP sets AQ = AP·U⁻¹ in O(p r²) when Gram–Schmidt kept all r
// columns: then Q = P·U⁻¹ with U = QᵀP upper triangular.
func (m *model) aqFromAP(r int) {
	p, R := m.p, m.maxR
	u := m.sc1
	for x := 0; x < r; x++ {
		for y := 0; y < r; y++ {
			s := 0.0
			for i := 0; i < p; i++ {
				s += m.q[i*R+x] * m.pl[i*R+y]
			}
			u[x*R+y] = s
		}
	}
	for i := 0; i < p; i++ {
		row := m.aq[i*R : i*R+R]
		src := m.ap[i*R : i*R+R]
		for y := 0; y < r; y++ {
			v := src[y]
			for x := 0; x < y; x++ {
				v -= row[x] * u[x*R+y]
			}
			row[y] = v / u[y*R+y]
		}
		for y := r; y < R; y++ {
			row[y] = 0
		}
	}
}

// symTimesSparse sets the first ncol columns of dst (p × maxR) to A·src,
// reading only the nonzero entries of src and the stored upper triangle of
// A (row i of A is A[i, i:] followed by the column A[:i, i]).
func (m *model) symTimesSparse(dst, src []float64, ncol int) {
	p, R := m.p, m.maxR
	a := m.a.RawSymmetric()
	st := a.Stride
	for i := range dst[:p*R] {
		dst[i] = 0
	}
	for j := 0; j < ncol; j++ {
		for i := 0; i < p; i++ {
			v := src[i*R+j]
			if v == 0 {
				continue
			}
			// upper part: A[i, i:] into dst[i:, j]
			blas64.Axpy(v, blas64.Vector{N: p - i, Inc: 1, Data: a.Data[i*st+i : i*st+p]},
				blas64.Vector{N: p - i, Inc: R, Data: dst[i*R+j:]})
			if i > 0 {
				// lower part: A[:i, i] (stored as column i of the upper triangle)
				blas64.Axpy(v, blas64.Vector{N: i, Inc: st, Data: a.Data[i:]},
					blas64.Vector{N: i, Inc: R, Data: dst[j:]})
			}
		}
	}
}

// computePattern fills pt for the model and its missing set: the reduced
// covariance S' = A − E_m K E_mᵀ of the imputed frame, M' = PᵀS'P, the
// residual traces θ of C̃S'C̃, the limits and the per-channel RBC data.
// It allocates nothing for the base pattern (no missing channel).
func (m *model) computePattern(pt *pattern, ls *limitSpec) {
	p, R, r, rq := m.p, m.maxR, m.r, m.rq
	k := len(pt.miss)
	a := m.a.RawSymmetric()
	pt.err = nil
	// Row i of S'P and S'Q: rows of AP, AQ minus (K P_m) for i ∈ m.
	// spRow(i) writes the i-th row of S'P into dst (len r) etc.
	mi := func(i int) int { // position of i in miss or -1
		for j, v := range pt.miss {
			if v == i {
				return j
			}
		}
		return -1
	}
	// M' = M − P_mᵀ K P_m; QᵀS'Q = QᵀAQ − Q_mᵀ K Q_m.
	mp, qsq := m.sc1, m.sc2
	sTr, sFro2 := m.reducedMoments(pt, mp, qsq)
	// Pseudo-inverse of M' by Jacobi eigen-decomposition (r is small).
	pt.rank = symPinv(pt.minv, mp, r, R, m.eig, m.ev, m.sc3)
	// Residual traces θ₁ = tr S' − tr QᵀS'Q, θ₂ = ‖S'‖² − 2‖S'Q‖² + ‖QᵀS'Q‖².
	th1 := sTr
	qsqF := 0.0
	for i := 0; i < rq; i++ {
		th1 -= qsq[i*R+i]
		for j := 0; j < rq; j++ {
			qsqF += qsq[i*R+j] * qsq[i*R+j]
		}
	}
	sqF := 0.0
	cross := 0.0
	var sp, sq, csp [64]float64 // r ≤ 64 (MaxModes)
	for i := 0; i < p; i++ {
		m.rowSP(sp[:r], sq[:r], i, mi(i), pt)
		for j := 0; j < rq; j++ {
			sqF += sq[j] * sq[j]
		}
	}
	th2 := sFro2 - 2*sqF + qsqF
	// QᵀS'P (rq × r) = Σᵢ Qᵢᵀ (S'P)ᵢ.
	qsp := m.sc3
	for i := range qsp[:R*R] {
		qsp[i] = 0
	}
	for i := 0; i < p; i++ {
		m.rowSP(sp[:r], sq[:r], i, mi(i), pt)
		for x := 0; x < rq; x++ {
			qx := m.q[i*R+x]
			if qx == 0 {
				continue
			}
			for y := 0; y < r; y++ {
				qsp[x*R+y] += qx * sp[y]
			}
		}
	}
	pt.theta = limits.Theta{T1: th1, T2: th2}
	if ls.spe == SPEJacksonMudholkar {
		pt.theta.T3 = m.theta3(pt, ls.jmSpace)
	}
	pt.setT2SPELimits(ls, sTr)
	// Per channel: D'ᵢᵢ, (D'S'C̃)ᵢᵢ, Rᵢᵢ; cross = tr(S'D'S'C̃) = Σᵢ (D'S'C̃)ᵢᵢ... computed
	// as tr(M'⁺ (C̃S'P)ᵀ(C̃S'P)) = Σᵢ (C̃S'P)ᵢ M'⁺ (C̃S'P)ᵢᵀ.
	tau2, delta2 := pt.t2Lim, pt.speLim
	for i := 0; i < p; i++ {
		mx := mi(i)
		m.rowSP(sp[:r], sq[:r], i, mx, pt)
		// csp = (S'P)ᵢ − Qᵢ·QᵀS'P
		for y := 0; y < r; y++ {
			v := sp[y]
			for x := 0; x < rq; x++ {
				v -= m.q[i*R+x] * qsp[x*R+y]
			}
			csp[y] = v
		}
		dd, dsc := 0.0, 0.0
		for x := 0; x < r; x++ {
			px := m.pl[i*R+x]
			cx := csp[x]
			for y := 0; y < r; y++ {
				w := pt.minv[x*R+y]
				dd += px * w * m.pl[i*R+y]
				dsc += px * w * csp[y]
				cross += cx * w * csp[y]
			}
		}
		pt.dd[i] = dd
		// Rᵢᵢ = S'ᵢᵢ − 2(S'Q)ᵢ·Qᵢ + Qᵢ(QᵀS'Q)Qᵢᵀ
		sii := a.Data[i*a.Stride+i]
		if mx >= 0 {
			sii -= pt.kc[mx*k+mx]
		}
		rii := sii
		for x := 0; x < rq; x++ {
			qx := m.q[i*R+x]
			rii -= 2 * sq[x] * qx
			for y := 0; y < rq; y++ {
				rii += qx * qsq[x*R+y] * m.q[i*R+y]
			}
		}
		rii = math.Max(rii, 0)
		ct := m.ctd[i]
		var den, num float64
		if ls.rbc == IndexSPE {
			den, num = ct, rii
		} else {
			den = dd/tau2 + ct/delta2
			num = dd/(tau2*tau2) + 2*dsc/(tau2*delta2) + rii/(delta2*delta2)
		}
		if !m.include[i] || mx >= 0 || den <= 1e-12 {
			pt.rbcInv[i] = 0
			pt.rbcLim[i] = math.Inf(1)
			continue
		}
		pt.rbcInv[i] = 1 / den
		pt.rbcLim[i] = limits.RBC(ls.chi1, num, den)
	}
	pt.cross = cross
	pt.setPhiLimit(ls, cross)
}

// reducedMoments writes into mp and qsq (r × r, stride maxR) the moments
// of the reduced correlation S' = A − K of pattern pt (K the correction of
// its missing channels): M' = M − P_mᵀ K P_m and QᵀS'Q = QᵀAQ − Q_mᵀ K Q_m,
// and returns tr S' and ‖S'‖²_F.
func (m *model) reducedMoments(pt *pattern, mp, qsq []float64) (sTr, sFro2 float64) {
	R, r := m.maxR, m.r
	k := len(pt.miss)
	a := m.a.RawSymmetric()
	for i := 0; i < r; i++ {
		for j := 0; j < r; j++ {
			mp[i*R+j] = m.m[i*R+j]
			qsq[i*R+j] = m.qaq[i*R+j]
		}
	}
	sTr, sFro2 = m.trA, m.aFro2
	for x, ix := range pt.miss {
		sTr -= pt.kc[x*k+x]
		for y, iy := range pt.miss {
			kv := pt.kc[x*k+y]
			av := a.Data[min(ix, iy)*a.Stride+max(ix, iy)]
			sFro2 += (av-kv)*(av-kv) - av*av
			for i := 0; i < r; i++ {
				for j := 0; j < r; j++ {
					mp[i*R+j] -= m.pl[ix*R+i] * kv * m.pl[iy*R+j]
					qsq[i*R+j] -= m.q[ix*R+i] * kv * m.q[iy*R+j]
				}
			}
		}
	}
	return sTr, sFro2
}

// setT2SPELimits sets the T² limit of pattern pt (its rank, the form and
// sample size of ls) and its SPE limit (+Inf when the modes leave no
// residual space, relative to tr S' = sTr); an error of either is kept in
// pt.err and its limit is +Inf.
func (pt *pattern) setT2SPELimits(ls *limitSpec, sTr float64) {
	var err error
	l := pt.rank
	if l < 1 {
		pt.t2Lim = math.Inf(1)
	} else if ls.t2 == T2ChiSquare || math.IsInf(ls.nEff, 1) {
		pt.t2Lim, err = limits.T2ChiSquare(ls.alpha, l)
	} else if ls.t2 == T2PhaseI {
		pt.t2Lim, err = limits.T2PhaseI(ls.alpha, l, ls.nEff)
	} else {
		pt.t2Lim, err = limits.T2PhaseII(ls.alpha, l, ls.nEff)
	}
	if err != nil {
		pt.err = err
		pt.t2Lim = math.Inf(1)
	}
	switch {
	case pt.theta.T1 <= emptyResidual*math.Max(sTr, 1):
		// The modes span every included channel (e.g. as many 1-sparse
		// modes as channels): the residual subspace is empty up to
		// rounding, SPE is identically zero and carries no information.
		// SPE cannot alarm and φ reduces to T²/τ², not an error.
		pt.speLim, err = math.Inf(1), nil
	case ls.spe == SPEJacksonMudholkar:
		pt.speLim, err = limits.SPEJacksonMudholkar(ls.alpha, pt.theta)
	default:
		pt.speLim, err = limits.SPEBox(ls.alpha, pt.theta)
	}
	if err != nil {
		pt.speLim = math.Inf(1)
		if pt.err == nil {
			pt.err = err
		}
	}
}

// setPhiLimit sets the limit of the combined index φ of pattern pt from
// its T² and SPE limits, its residual traces and cross = tr(S'D'S'C̃): +Inf
// without a T² limit; with no SPE limit, that of the T² part alone.
func (pt *pattern) setPhiLimit(ls *limitSpec, cross float64) {
	tau2, delta2, l := pt.t2Lim, pt.speLim, pt.rank
	var err error
	if math.IsInf(tau2, 1) {
		pt.phiLim = math.Inf(1)
		return
	}
	// With no usable SPE limit (δ² = +∞) the SPE terms drop out of the
	// traces and φ = T²/τ²: its limit is that of the T² part alone.
	if math.IsInf(delta2, 1) {
		cross = 0
	}
	a1, a2 := limits.PhiTraces(l, tau2, delta2, pt.theta, cross)
	pt.phiLim, err = limits.PhiLimit(ls.alpha, a1, a2)
	if err != nil {
		pt.phiLim = math.Inf(1)
		if pt.err == nil {
			pt.err = err
		}
	}
}

// rowSP writes row i of S'P and S'Q into sp and sq (len r): the rows of AP
// and AQ, minus K_{x,·}P_m (resp. Q_m) when i is the x-th missing channel.
func (m *model) rowSP(sp, sq []float64, i, x int, pt *pattern) {
	R := m.maxR
	copy(sp, m.ap[i*R:i*R+len(sp)])
	copy(sq, m.aq[i*R:i*R+len(sq)])
	if x < 0 {
		return
	}
	k := len(pt.miss)
	for y, iy := range pt.miss {
		kv := pt.kc[x*k+y]
		if kv == 0 {
			continue
		}
		for j := range sp {
			sp[j] -= kv * m.pl[iy*R+j]
			sq[j] -= kv * m.q[iy*R+j]
		}
	}
}

// jmScratch holds the p × p work matrices of θ₃ for the Jackson–Mudholkar
// limit (allocated only when that limit is chosen).
type jmScratch struct {
	r, r2      blas64.General
	w, qtw, qq []float64
}

func newJMScratch(p, maxR int) *jmScratch {
	return &jmScratch{
		r:  blas64.General{Rows: p, Cols: p, Stride: p, Data: make([]float64, p*p)},
		r2: blas64.General{Rows: p, Cols: p, Stride: p, Data: make([]float64, p*p)},
		w:  make([]float64, p*maxR), qtw: make([]float64, maxR*maxR), qq: make([]float64, p*maxR),
	}
}

// theta3 returns θ₃ = tr(R³) of the residual covariance R = C̃S'C̃, formed
// explicitly: O(p²r) for R and O(p³) for R² (the Jackson–Mudholkar limit's
// cost; Box's limit needs only θ₁, θ₂ from traces).
func (m *model) theta3(pt *pattern, js *jmScratch) float64 {
	p, R, rq := m.p, m.maxR, m.rq
	a := m.a.RawSymmetric()
	rm := js.r
	k := len(pt.miss)
	// S' into rm.
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			v := a.Data[i*a.Stride+j]
			rm.Data[i*p+j] = v
			rm.Data[j*p+i] = v
		}
	}
	for x, ix := range pt.miss {
		for y, iy := range pt.miss {
			rm.Data[ix*p+iy] -= pt.kc[x*k+y]
		}
	}
	// R = C̃ S' C̃ with C̃ = I − QQᵀ: W = S'Q (p×rq), R = S' − WQᵀ − QWᵀ + Q(QᵀW)Qᵀ.
	w := js.w
	qg := blas64.General{Rows: p, Cols: rq, Stride: R, Data: m.q}
	wg := blas64.General{Rows: p, Cols: rq, Stride: R, Data: w}
	blas64.Gemm(blas.NoTrans, blas.NoTrans, 1, rm, qg, 0, wg)
	qtw := js.qtw
	blas64.Gemm(blas.Trans, blas.NoTrans, 1, qg, wg, 0, blas64.General{Rows: rq, Cols: rq, Stride: R, Data: qtw})
	blas64.Gemm(blas.NoTrans, blas.Trans, -1, wg, qg, 1, rm)
	blas64.Gemm(blas.NoTrans, blas.Trans, -1, qg, wg, 1, rm)
	qq := js.qq
	blas64.Gemm(blas.NoTrans, blas.NoTrans, 1, qg, blas64.General{Rows: rq, Cols: rq, Stride: R, Data: qtw}, 0,
		blas64.General{Rows: p, Cols: rq, Stride: R, Data: qq})
	blas64.Gemm(blas.NoTrans, blas.Trans, 1, blas64.General{Rows: p, Cols: rq, Stride: R, Data: qq}, qg, 1, rm)
	blas64.Gemm(blas.NoTrans, blas.NoTrans, 1, rm, rm, 0, js.r2)
	t3 := 0.0
	for i := range rm.Data[:p*p] {
		t3 += rm.Data[i] * js.r2.Data[i]
	}
	return t3
}

// symPinv writes the pseudo-inverse of the symmetric r × r matrix s (stride
// R) into dst and returns its numerical rank (eigenvalues below 1e-10 of the
// largest are dropped). Cyclic Jacobi; v, ev, w are scratch.
func symPinv(dst, s []float64, r, R int, v, ev, w []float64) int {
	for i := 0; i < r; i++ {
		for j := 0; j < r; j++ {
			w[i*R+j] = s[i*R+j]
			v[i*R+j] = 0
		}
		v[i*R+i] = 1
	}
	for sweep := 0; sweep < 60; sweep++ {
		off := 0.0
		for i := 0; i < r; i++ {
			for j := i + 1; j < r; j++ {
				off += w[i*R+j] * w[i*R+j]
			}
		}
		if off < 1e-300 {
			break
		}
		for i := 0; i < r; i++ {
			for j := i + 1; j < r; j++ {
				aij := w[i*R+j]
				if aij == 0 {
					continue
				}
				theta := (w[j*R+j] - w[i*R+i]) / (2 * aij)
				t := math.Copysign(1, theta) / (math.Abs(theta) + math.Sqrt(theta*theta+1))
				c := 1 / math.Sqrt(t*t+1)
				sn := t * c
				for k := 0; k < r; k++ {
					wki, wkj := w[k*R+i], w[k*R+j]
					w[k*R+i] = c*wki - sn*wkj
					w[k*R+j] = sn*wki + c*wkj
				}
				for k := 0; k < r; k++ {
					wik, wjk := w[i*R+k], w[j*R+k]
					w[i*R+k] = c*wik - sn*wjk
					w[j*R+k] = sn*wik + c*wjk
				}
				for k := 0; k < r; k++ {
					vki, vkj := v[k*R+i], v[k*R+j]
					v[k*R+i] = c*vki - sn*vkj
					v[k*R+j] = sn*vki + c*vkj
				}
			}
		}
	}
	mx := 0.0
	for i := 0; i < r; i++ {
		ev[i] = w[i*R+i]
		mx = math.Max(mx, ev[i])
	}
	rank := 0
	for i := 0; i < r; i++ {
		for j := 0; j < r; j++ {
			dst[i*R+j] = 0
		}
	}
	for k := 0; k < r; k++ {
		if !(ev[k] > 1e-10*mx) {
			continue
		}
		rank++
		inv := 1 / ev[k]
		for i := 0; i < r; i++ {
			vi := v[i*R+k] * inv
			for j := 0; j < r; j++ {
				dst[i*R+j] += vi * v[j*R+k]
			}
		}
	}
	return rank
}
