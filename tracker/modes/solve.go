package modes

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// Default stopping parameters.
const (
	// DefaultTol is the default step tolerance on the unit loadings. The
	// stationarity gap, second order in the distance to a fixed point, is
	// compared with DefaultTol² times the scale of the objective.
	DefaultTol = 1e-6
	// DefaultMaxIter caps the ConGradU steps of one solve (and, separately,
	// of the refit and of the dense start).
	DefaultMaxIter = 1000
)

// gapTolFloor is the smallest step tolerance the stationarity gap can
// certify in float64 (√(64·2⁻⁵²) ≈ 1.2e-7).
const gapTolFloor = 1.2e-7

// Start selects the cold start of a solve.
type Start int

const (
	// StartAuto is StartDense for LogPen and ExpPen (their zero loadings are
	// sticky, so they start from all variables) and StartColumn otherwise.
	StartAuto Start = iota
	// StartColumn starts from the column of A with the largest Euclidean norm,
	// normalised (one power step from e_i*; ties: lowest index). On Pitprops
	// the truncated power method from this start reaches the exact λ*(k) for
	// every k (exhaustive search; testdata/REFERENCE.md).
	StartColumn
	// StartDense starts from the leading eigenvector of A, computed by the
	// power method from StartColumn.
	StartDense
	// StartIndex starts from the unit vector e_i*, i* the index of the
	// column of A with the largest norm. In the factor form A = BᵀB this is
	// the start z⁰ = b_i*/‖b_i*‖ of the GPower code of Journée et al. (2010),
	// used for the ℓ0-penalised Pitprops check values of the tests.
	StartIndex
)

// Refit selects whether the loadings are replaced, after the sparse solve, by
// the leading eigenvector of A restricted to the support found.
type Refit int

const (
	// RefitAuto refits the soft-thresholding penalties (L1Pen, L1PenSqrt,
	// LogPen, ExpPen), whose loadings are shrunk; the other methods already
	// end at an eigenvector of their support, or (L1) keep their constraint.
	RefitAuto   Refit = iota
	RefitAlways       // refit every method (for L1 the result may leave the ℓ1 ball)
	RefitNever        // keep the solver's loadings
)

// Options tunes Solve. The zero value (or a nil *Options) means defaults.
type Options struct {
	// Tol: stop when ‖x_t − x_{t−1}‖₂ ≤ Tol or when the stationarity gap
	//	γ(x) = max_{u∈C} ⟨∇F(x), u − x⟩ (penalised: with −g(u) + g(x))
	// is at most Tol²·s, s = 2|xᵀAx| (√(xᵀAx) for L1PenSqrt). The gap is a
	// by-product of the step (the oracle's maximum), second order in the
	// distance to a fixed point, hence Tol²; for L0Pen it is the gap of the
	// factor form, known one step late; for LogPen and ExpPen it is the gap
	// of the reweighted (majorised) step. Below Tol ≈ 1.2e-7 float64 cannot
	// resolve the gap and only the step rule is used. Default DefaultTol.
	Tol float64
	// MaxIter caps the iterations; default DefaultMaxIter. Hitting it leaves
	// Result.Converged false.
	MaxIter int
	// Warm, if not nil (length p), is the start (any nonzero vector; it is
	// normalised). Nil means the cold start chosen by Start.
	Warm []float64
	// Start selects the cold start.
	Start Start
	// Refit selects the refit on the support.
	Refit Refit
	// EpsStages > 1 runs LogPen and ExpPen with ε continuation: EpsStages
	// stages with ε decreasing geometrically from 1 to Sparsity.Eps, each
	// warm-started from the previous (when Eps < 1). Default 1: ε fixed.
	EpsStages int
	// Trace, if not nil, is called after the start and after every step with
	// the iteration number, the objective F(x) of the sparse problem
	// (xᵀAx − g(x), or √(xᵀAx) − γ‖x‖₁) and whether x lies in the constraint
	// set (starts need not). It is not called during the dense start or refit.
	Trace func(iter int, objective float64, feasible bool)
}

func (o *Options) tol() float64 {
	if o == nil || !(o.Tol > 0) {
		return DefaultTol
	}
	return o.Tol
}

func (o *Options) maxIter() int {
	if o == nil || o.MaxIter <= 0 {
		return DefaultMaxIter
	}
	return o.MaxIter
}

// Result reports one solve.
type Result struct {
	// Variance is xᵀAx of the returned unit loadings (after any refit).
	Variance float64
	// Objective is F(x) of the sparse problem at the solver's final iterate,
	// before any refit (xᵀAx for Dense, L0 and L1). In the degenerate ℓ1 case
	// where the maximiser lies inside the unit ball, Objective is its value
	// and the loadings are its direction, normalised.
	Objective float64
	// Card is the number of nonzero loadings.
	Card int
	// Iterations counts ConGradU steps (all ε stages, plus the power steps of
	// a dense start); RefitIterations the power steps of the refit.
	Iterations, RefitIterations int
	// Converged reports that a stopping rule fired before the iteration cap
	// (in the last ε stage, and in the refit when one was done).
	Converged bool
	// Gap is the last stationarity gap computed (NaN if none was).
	Gap float64
	// Empty reports that the penalty left no loading from this start: the
	// loadings are all zero and Variance is 0.
	Empty bool
	// Cold reports that the result came from a cold start.
	Cold bool
}

// Workspace holds the buffers of the solvers for p × p matrices. A
// Workspace is not safe for concurrent use.
type Workspace struct {
	p  int
	op *operator

	x, u, c   []float64
	xs, us    []int // supports of x and u (ascending)
	pre       []float64
	preS      []int
	heap      []int
	sorted    []float64
	cn        []float64 // column norms² of the current deflated matrix
	e         []float64 // unit vector scratch
	lastNormI float64   // L0Pen: ‖c_I‖ of the last oracle (lagged gap)
}

// NewWorkspace returns a workspace for p × p matrices.
func NewWorkspace(p int) *Workspace { return newWorkspace(p, 0) }

func newWorkspace(p, maxDefl int) *Workspace {
	if p < 1 {
		panic("modes: workspace dimension < 1")
	}
	return &Workspace{
		p:      p,
		op:     newOperator(p, maxDefl),
		x:      make([]float64, p),
		u:      make([]float64, p),
		c:      make([]float64, p),
		pre:    make([]float64, p),
		preS:   make([]int, 0, p),
		xs:     make([]int, 0, p),
		us:     make([]int, 0, p),
		heap:   make([]int, 0, p),
		sorted: make([]float64, p),
		cn:     make([]float64, p),
		e:      make([]float64, p),
	}
}

// Solve finds the leading sparse mode of the symmetric positive semidefinite
// matrix a under the sparsity model sp and writes its unit loadings, sign
// fixed so the largest-magnitude loading is positive (ties: lowest index),
// into dst (length p). ws may be nil (one is allocated); with a workspace
// and a nil opt.Trace Solve does not allocate.
//
// Errors: sp out of range for this matrix (ErrSparsity; for L0Pen
// γ ≥ max A_ii and L1PenSqrt γ ≥ max √A_ii, ErrPenaltyTooHigh), a NaN or
// infinite entry (ErrNotFinite), a negative diagonal entry (ErrNotPSD), a
// zero matrix (ErrZeroMatrix). A penalty that leaves nothing from this start
// is not an error: Result.Empty is set and dst is zero. Solve panics if a,
// dst or ws do not have dimension p.
func Solve(dst []float64, a *mat.SymDense, sp Sparsity, opt *Options, ws *Workspace) (Result, error) {
	p := a.SymmetricDim()
	if len(dst) != p {
		panic("modes: Solve dst length mismatch")
	}
	if ws == nil {
		ws = NewWorkspace(p)
	}
	if ws.p != p {
		panic("modes: Solve workspace dimension mismatch")
	}
	ws.op.setMatrix(a)
	ws.op.defl = Projection
	maxDiag, _, err := ws.checkDiag()
	if err != nil {
		return Result{}, err
	}
	if err := sp.check(p, maxDiag); err != nil {
		return Result{}, err
	}
	if !ws.op.baseColumnNorms(ws.cn) {
		return Result{}, ws.nonFinite()
	}
	var res Result
	if opt != nil && opt.Warm != nil {
		if len(opt.Warm) != p {
			panic("modes: Solve warm start length mismatch")
		}
		res, err = ws.solve(sp, opt, opt.Warm, false, nil, nil)
	} else {
		res, err = ws.solve(sp, opt, nil, true, nil, nil)
	}
	if err != nil {
		return Result{}, err
	}
	copy(dst, ws.x)
	return res, nil
}

// checkDiag validates the diagonal of A_0 and returns its maximum and sum.
func (ws *Workspace) checkDiag() (maxDiag, trace float64, err error) {
	for i := 0; i < ws.p; i++ {
		d := ws.op.diag(i)
		if math.IsNaN(d) || math.IsInf(d, 0) {
			return 0, 0, fmt.Errorf("%w: A[%d,%d] = %g", ErrNotFinite, i, i, d)
		}
		if d < 0 {
			return 0, 0, fmt.Errorf("%w: negative variance A[%d,%d] = %g", ErrNotPSD, i, i, d)
		}
		trace += d
		maxDiag = math.Max(maxDiag, d)
	}
	if trace == 0 {
		// PSD with zero trace: every entry is zero.
		return 0, 0, fmt.Errorf("%w: trace is 0", ErrZeroMatrix)
	}
	return maxDiag, trace, nil
}

// nonFinite locates the first non-finite entry of A_0 for the error text.
func (ws *Workspace) nonFinite() error {
	d, st := ws.op.a.Data, ws.op.a.Stride
	for i := 0; i < ws.p; i++ {
		for j := i; j < ws.p; j++ {
			if v := d[i*st+j]; math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: A[%d,%d] = %g", ErrNotFinite, i, j, v)
			}
		}
	}
	return fmt.Errorf("%w: overflow in a product with A", ErrNotFinite)
}

// errEmptyOperator reports that the (deflated) matrix has no variance left.
var errEmptyOperator = fmt.Errorf("%w: no variance left", ErrZeroMatrix)

// solve runs one mode on the current operator. With cold, ws.cn must hold
// the column norms² of the current (deflated) matrix. warm, if not nil, is
// the start. refitFrom (support refitSupp), if not nil, starts the refit
// when the solver ends on that same support. On success ws.x holds the
// sign-fixed unit loadings, ws.xs its support, ws.c = A_t x, and ws.pre,
// ws.preS the solver's final iterate before the refit (the warm start for
// the next solve).
func (ws *Workspace) solve(sp Sparsity, opt *Options, warm []float64, cold bool, refitFrom []float64, refitSupp []int) (Result, error) {
	res := Result{Gap: math.NaN(), Cold: cold}
	tol, maxIter := opt.tol(), opt.maxIter()
	haveC := false // ws.c already holds A_t x for the start
	if !cold {
		copy(ws.x, warm)
		if !ws.normalizeX() {
			cold = true
			res.Cold = true
		} else {
			ws.op.apply(ws.c, ws.x, ws.xs)
			haveC = true
			if ws.normC() == 0 {
				// The warm start lies in the null space: start afresh.
				cold = true
				res.Cold = true
			}
		}
		if cold && !ws.deflatedNorms() {
			return res, ws.nonFinite()
		}
	}
	if cold {
		n, err := ws.coldStart(startOf(sp, opt), tol, maxIter)
		res.Iterations += n
		if err != nil {
			return res, err
		}
		haveC = false
	}
	stages := 1
	if opt != nil && opt.EpsStages > 1 && (sp.Method == LogPen || sp.Method == ExpPen) && sp.Eps < 1 {
		stages = opt.EpsStages
	}
	var trace func(int, float64, bool)
	if opt != nil {
		trace = opt.Trace
	}
	var st runStats
	for s := 0; s < stages; s++ {
		eps := sp.Eps
		if stages > 1 {
			eps = math.Exp(math.Log(sp.Eps) * float64(s) / float64(stages-1))
		}
		var err error
		st, err = ws.iterate(sp, eps, tol, maxIter, trace, haveC)
		haveC = false
		res.Iterations += st.iters
		if err != nil {
			return res, err
		}
		if st.empty {
			for i := range ws.x {
				ws.x[i] = 0
			}
			ws.xs = ws.xs[:0]
			res.Empty = true
			return res, nil
		}
	}
	res.Objective, res.Gap, res.Converged = st.obj, st.gap, st.converged
	// Loadings are unit vectors. Only the degenerate ℓ1 tie case ends inside
	// the ball ((s/m₁)·sign(c) on m₁ tied entries); Objective keeps the
	// constrained value, the loadings keep the direction.
	ws.normalizeX()
	copy(ws.pre, ws.x)
	ws.preS = append(ws.preS[:0], ws.xs...)
	refit := opt != nil && opt.Refit == RefitAlways
	if opt == nil || opt.Refit == RefitAuto {
		switch sp.Method {
		case L1Pen, L1PenSqrt, LogPen, ExpPen:
			refit = true
		}
	}
	if refit {
		if refitFrom != nil && slices.Equal(ws.xs, refitSupp) {
			// Same support as last time: the previous eigenvector of the
			// block is the better start for the power iteration.
			for _, i := range ws.xs {
				ws.x[i] = refitFrom[i]
			}
			ws.normalizeX()
		}
		n, conv, err := ws.refit(tol, maxIter)
		res.RefitIterations = n
		res.Converged = res.Converged && conv
		if err != nil {
			return res, err
		}
		ws.normalizeX() // drops loadings the refit set to exactly 0
	}
	ws.fixSign()
	// c = A_t x for the final loadings (the caller deflates with it).
	ws.op.apply(ws.c, ws.x, ws.xs)
	res.Variance = dotSupp(ws.x, ws.c, ws.xs)
	res.Card = len(ws.xs)
	return res, nil
}

// startOf is the cold start of opt (StartAuto: the dense start for the
// smooth-ℓ0 surrogates, the largest column otherwise).
func startOf(sp Sparsity, opt *Options) Start {
	start := StartAuto
	if opt != nil {
		start = opt.Start
	}
	if start == StartAuto {
		start = StartColumn
		if sp.Method == LogPen || sp.Method == ExpPen {
			start = StartDense
		}
	}
	return start
}

// coldStart puts the cold start into ws.x: from the column of largest norm
// (its index alone, or the column itself normalized), then for StartDense
// the dense power iteration from there. It returns the iterations used;
// errEmptyOperator when the matrix is zero.
func (ws *Workspace) coldStart(start Start, tol float64, maxIter int) (int, error) {
	best := -1
	for i, v := range ws.cn {
		if best < 0 || v > ws.cn[best] {
			best = i
		}
	}
	if ws.cn[best] == 0 {
		return 0, errEmptyOperator
	}
	for i := range ws.e {
		ws.e[i] = 0
	}
	if start == StartIndex {
		for i := range ws.x {
			ws.x[i] = 0
		}
		ws.x[best] = 1
		ws.xs = append(ws.xs[:0], best)
	} else {
		ws.e[best] = 1
		ws.us = append(ws.us[:0], best)
		ws.op.apply(ws.x, ws.e, ws.us)
		ws.e[best] = 0
		if !ws.normalizeX() {
			return 0, errEmptyOperator
		}
	}
	if start == StartDense {
		st, err := ws.iterate(Sparsity{}, 0, tol, maxIter, nil, false)
		return st.iters, err
	}
	return 0, nil
}

// deflatedNorms fills ws.cn with the column norms² of A_t when the caller
// did not (the warm start failed). It recomputes them from A_0 through the
// recorded deflations; O(p²) per deflation.
func (ws *Workspace) deflatedNorms() bool {
	op := ws.op
	t := op.t
	if !op.baseColumnNorms(ws.cn) {
		return false
	}
	// Replay the deflations one by one, as the Set does on a cold pass.
	op.t = 0
	for s := 0; s < t; s++ {
		x, supp := op.xs[s], op.xsupp[s]
		op.apply(ws.u, x, supp) // y = A_s x
		f := dotSupp(x, ws.u, supp)
		op.apply(ws.e, ws.u, nil) // z = A_s y
		deflateColumnNorms(ws.cn, op.defl, x, ws.u, ws.e, f)
		op.t = s + 1
	}
	for i := range ws.e {
		ws.e[i] = 0
	}
	return true
}

// normalizeX scales ws.x to unit length and rebuilds ws.xs; false if x is
// zero or not finite.
func (ws *Workspace) normalizeX() bool {
	var n float64
	for _, v := range ws.x {
		n += v * v
	}
	if !(n > 0) || math.IsInf(n, 0) {
		return false
	}
	n = 1 / math.Sqrt(n)
	ws.xs = ws.xs[:0]
	for i, v := range ws.x {
		if v != 0 {
			ws.x[i] = v * n
			ws.xs = append(ws.xs, i)
		}
	}
	return true
}

func (ws *Workspace) normC() float64 {
	var n float64
	for _, v := range ws.c {
		n += v * v
	}
	return math.Sqrt(n)
}

func dotSupp(x, y []float64, supp []int) float64 {
	var s float64
	for _, i := range supp {
		s += x[i] * y[i]
	}
	return s
}

// fixSign flips x so that its largest-magnitude entry (lowest index on ties)
// is positive.
func (ws *Workspace) fixSign() {
	best, bv := -1, 0.0
	for _, i := range ws.xs {
		if a := math.Abs(ws.x[i]); a > bv {
			best, bv = i, a
		}
	}
	if best >= 0 && ws.x[best] < 0 {
		for _, i := range ws.xs {
			ws.x[i] = -ws.x[i]
		}
	}
}

type runStats struct {
	f, obj, gap float64
	iters       int
	converged   bool
	empty       bool
}

// iterate runs ConGradU for sp from the unit vector ws.x (support ws.xs);
// with haveC, ws.c already holds A_t x.
func (ws *Workspace) iterate(sp Sparsity, eps, tol float64, maxIter int, trace func(int, float64, bool), haveC bool) (runStats, error) {
	st := runStats{gap: math.NaN()}
	if !haveC {
		ws.op.apply(ws.c, ws.x, ws.xs)
	}
	f := dotSupp(ws.x, ws.c, ws.xs)
	if err := ws.checkProduct(f); err != nil {
		return st, err
	}
	feasible := ws.feasible(sp)
	if trace != nil {
		trace(0, ws.objective(sp, eps, f), feasible)
	}
	sqrtForm := sp.Method == L1PenSqrt
	// The gap is second order in the distance to a fixed point and computed
	// from quantities of size xᵀAx, so it cannot certify a step tolerance
	// below about √ε_machine; then only the step rule is used.
	useGap := tol >= gapTolFloor
	for {
		gap, ok := ws.oracle(sp, eps, f)
		if !ok {
			st.empty = true
			return st, nil
		}
		scale := 2 * math.Abs(f)
		if sqrtForm {
			scale = math.Sqrt(math.Max(f, 0))
		}
		thr := tol * tol * scale
		if !math.IsNaN(gap) && useGap {
			st.gap = gap
			if feasible && gap <= thr {
				st.converged = true
				break
			}
		}
		if st.iters >= maxIter {
			break
		}
		var step float64
		for i := range ws.x {
			d := ws.u[i] - ws.x[i]
			step += d * d
		}
		step = math.Sqrt(step)
		ws.x, ws.u = ws.u, ws.x
		ws.xs, ws.us = ws.us, ws.xs
		st.iters++
		fPrev := f
		ws.op.apply(ws.c, ws.x, ws.xs)
		f = dotSupp(ws.x, ws.c, ws.xs)
		if err := ws.checkProduct(f); err != nil {
			return st, err
		}
		feasible = true
		if trace != nil {
			trace(st.iters, ws.objective(sp, eps, f), true)
		}
		if useGap && sp.Method == L0Pen && fPrev > 0 && f > 0 {
			// Lagged gap of the z-form (Luss & Teboulle 2013): with
			// y = (Ax_prev)_I/√f_prev, γ(z_prev) = 2‖y‖(√f − ‖y‖).
			y := ws.lastNormI / math.Sqrt(fPrev)
			g := 2 * y * (math.Sqrt(f) - y)
			st.gap = g
			if g <= tol*tol*2*f {
				st.converged = true
				break
			}
		}
		if step <= tol {
			st.converged = true
			break
		}
	}
	st.f = f
	st.obj = ws.objective(sp, eps, f)
	return st, nil
}

func (ws *Workspace) checkProduct(f float64) error {
	n := ws.normC()
	if math.IsNaN(n) || math.IsInf(n, 0) || math.IsNaN(f) || math.IsInf(f, 0) {
		return ws.nonFinite()
	}
	return nil
}

// feasible reports whether ws.x lies in the constraint set of sp.
func (ws *Workspace) feasible(sp Sparsity) bool {
	switch sp.Method {
	case L0:
		return len(ws.xs) <= sp.K
	case L1:
		var n1 float64
		for _, i := range ws.xs {
			n1 += math.Abs(ws.x[i])
		}
		return n1 <= sp.S*(1+1e-12)
	}
	return true
}

// phi returns φ_ε(t) and φ′_ε(t) of the smooth-ℓ0 surrogates (t ≥ 0):
//
//	log: φ = log(1 + t/ε)/log(1 + 1/ε),  φ′ = 1/((ε + t)·log(1 + 1/ε))
//	exp: φ = 1 − exp(−t/ε),              φ′ = exp(−t/ε)/ε
func phi(m Method, eps, t float64) (v, d float64) {
	if m == LogPen {
		l := math.Log1p(1 / eps)
		return math.Log1p(t/eps) / l, 1 / ((eps + t) * l)
	}
	e := math.Exp(-t / eps)
	return 1 - e, e / eps
}

// objective returns F(x) for the current ws.x with f = xᵀAx.
func (ws *Workspace) objective(sp Sparsity, eps, f float64) float64 {
	switch sp.Method {
	case L0Pen:
		return f - sp.Gamma*float64(len(ws.xs))
	case L1Pen, L1PenSqrt:
		var n1 float64
		for _, i := range ws.xs {
			n1 += math.Abs(ws.x[i])
		}
		if sp.Method == L1PenSqrt {
			return math.Sqrt(math.Max(f, 0)) - sp.Gamma*n1
		}
		return f - sp.Gamma*n1
	case LogPen, ExpPen:
		var g float64
		for _, i := range ws.xs {
			v, _ := phi(sp.Method, eps, math.Abs(ws.x[i]))
			g += v
		}
		return f - sp.Gamma*g
	}
	return f
}

// oracle computes the ConGradU step u (ws.u, ws.us) from c = Ax (ws.c) and
// returns the stationarity gap at x (NaN when not available) and false when
// u would be zero.
func (ws *Workspace) oracle(sp Sparsity, eps, f float64) (gap float64, ok bool) {
	c, u := ws.c, ws.u
	for i := range u {
		u[i] = 0
	}
	ws.us = ws.us[:0]
	switch sp.Method {
	case Dense:
		n := ws.normC()
		if n == 0 {
			return 0, false
		}
		for i, v := range c {
			if v != 0 {
				u[i] = v / n
				ws.us = append(ws.us, i)
			}
		}
		return 2 * (n - f), true
	case L0:
		n := ws.topK(sp.K)
		if n == 0 {
			return 0, false
		}
		return 2 * (n - f), true
	case L1:
		val, ok := ws.l1Step(sp.S)
		if !ok {
			return 0, false
		}
		return 2 * (val - f), true
	case L0Pen:
		thr := sp.Gamma * f
		var n float64
		for i, v := range c {
			if v*v > thr && v != 0 {
				u[i] = v
				n += v * v
				ws.us = append(ws.us, i)
			}
		}
		if n, ok = normalizeSupport(u, ws.us, n); !ok {
			return 0, false
		}
		ws.lastNormI = n
		return math.NaN(), true
	case L1Pen, L1PenSqrt, LogPen, ExpPen:
		tau := sp.Gamma / 2
		if sp.Method == L1PenSqrt {
			tau = sp.Gamma * math.Sqrt(math.Max(f, 0))
		}
		var n, pen float64 // pen = Σ τ_i|x_i|·(2/γ) scaled below
		for i, v := range c {
			t := tau
			if sp.Method == LogPen || sp.Method == ExpPen {
				_, d := phi(sp.Method, eps, math.Abs(ws.x[i]))
				t = tau * d
				pen += d * math.Abs(ws.x[i])
			} else {
				pen += math.Abs(ws.x[i])
			}
			a := math.Abs(v) - t
			if a > 0 {
				u[i] = math.Copysign(a, v)
				n += a * a
				ws.us = append(ws.us, i)
			}
		}
		if n, ok = normalizeSupport(u, ws.us, n); !ok {
			return 0, false
		}
		if sp.Method == L1PenSqrt {
			// F = √f − γ‖x‖₁: gap = ‖S_{γ√f}(Ax)‖/√f − √f + γ‖x‖₁.
			sf := math.Sqrt(math.Max(f, 0))
			if sf == 0 {
				return math.NaN(), true
			}
			return n/sf - sf + sp.Gamma*pen, true
		}
		// F = xᵀAx − γΣw|x|: gap = 2‖S‖ − 2f + γΣw_i|x_i|.
		return 2*n - 2*f + sp.Gamma*pen, true
	}
	return 0, false
}

// better reports whether entry i beats entry j for T_k (mag holds the
// magnitudes): larger magnitude, lower index on ties.
func better(mag []float64, i, j int) bool {
	a, b := mag[i], mag[j]
	return a > b || (a == b && i < j)
}

// topK writes u = T_k(c)/‖T_k(c)‖ and returns ‖T_k(c)‖ (0 if c = 0). A
// binary min-heap (root = worst kept entry) selects the k best in O(p log k).
func (ws *Workspace) topK(k int) float64 {
	c, h := ws.c, ws.heap[:0]
	mag := ws.sorted
	for i, v := range c {
		mag[i] = math.Abs(v)
	}
	for i := range c {
		if len(h) < k {
			h = append(h, i)
			// sift up: parent must be worse than child
			j := len(h) - 1
			for j > 0 {
				par := (j - 1) / 2
				if better(mag, h[par], h[j]) {
					h[par], h[j] = h[j], h[par]
					j = par
				} else {
					break
				}
			}
			continue
		}
		if !better(mag, i, h[0]) {
			continue
		}
		h[0] = i
		j := 0
		for {
			l, r, m := 2*j+1, 2*j+2, j
			if l < len(h) && better(mag, h[m], h[l]) {
				m = l
			}
			if r < len(h) && better(mag, h[m], h[r]) {
				m = r
			}
			if m == j {
				break
			}
			h[j], h[m] = h[m], h[j]
			j = m
		}
	}
	ws.heap = h
	var n float64
	ws.us = ws.us[:0]
	for _, i := range h {
		if c[i] != 0 {
			ws.us = append(ws.us, i)
			n += c[i] * c[i]
		}
	}
	if n == 0 {
		return 0
	}
	slices.Sort(ws.us)
	n = math.Sqrt(n)
	for _, i := range ws.us {
		ws.u[i] = c[i] / n
	}
	return n
}

// l1Step writes the maximiser u of ⟨c, u⟩ over ‖u‖₂ ≤ 1, ‖u‖₁ ≤ s and returns
// the maximum ⟨c, u⟩ (Luss & Teboulle 2013, the ℓ1-constrained map):
//
//	u = S_λ(c)/‖S_λ(c)‖₂, λ = 0 if ‖c‖₁ ≤ s‖c‖₂, else the unique λ with
//	‖S_λ(c)‖₁ = s‖S_λ(c)‖₂; value ‖S_λ(c)‖₂ + λs.
//
// λ is exact: with a₁ ≥ a₂ ≥ … the sorted |c_i|, the m largest survive for
// a_{m+1} ≤ λ < a_m, and with S₁ = Σ_{i≤m} a_i, S₂ = Σ_{i≤m} a_i² the root on
// that segment is λ = (S₁ − s·√((mS₂ − S₁²)/(m − s²)))/m. If the largest |c_i|
// is attained m₁ > s² times there is no root: the maximiser is
// (s/m₁)·sign(c_i) on the tied entries (inside the unit ball), value s·a₁.
func (ws *Workspace) l1Step(s float64) (float64, bool) {
	c, u := ws.c, ws.u
	var n1, n2 float64
	for _, v := range c {
		n1 += math.Abs(v)
		n2 += v * v
	}
	if n2 == 0 {
		return 0, false
	}
	n2 = math.Sqrt(n2)
	ws.us = ws.us[:0]
	if n1 <= s*n2 {
		for i, v := range c {
			if v != 0 {
				u[i] = v / n2
				ws.us = append(ws.us, i)
			}
		}
		return n2, true
	}
	a := ws.sorted
	for i, v := range c {
		a[i] = -math.Abs(v) // ascending sort of −|c| = descending |c|
	}
	slices.Sort(a)
	for i := range a {
		a[i] = -a[i]
	}
	p := len(a)
	m1 := 1
	for m1 < p && a[m1] == a[0] {
		m1++
	}
	if float64(m1) > s*s {
		v := s / float64(m1)
		for i, ci := range c {
			if math.Abs(ci) == a[0] {
				u[i] = math.Copysign(v, ci)
				ws.us = append(ws.us, i)
			}
		}
		return s * a[0], true
	}
	// t1 = Σ_{i<m}(a_i − b), t2 = Σ_{i<m}(a_i − b)² for the current boundary
	// b, updated as b moves down by δ ≥ 0 with nonnegative terms only
	// (t2 += 2δ·t1 + mδ², t1 += mδ), so near-ties do not cancel.
	var t1, t2, lambda float64
	found := false
	b := a[0]
	for m := 1; m <= p; m++ {
		next := 0.0
		if m < p {
			next = a[m]
		}
		delta := b - next
		fm := float64(m)
		t2 += 2*delta*t1 + fm*delta*delta
		t1 += fm * delta
		b = next
		if delta == 0 || t2 == 0 {
			continue // λ = b would not separate the m largest
		}
		// A relative slack of 1e-12 lets s = √m in floating point select
		// exactly m entries instead of admitting an m+1-th at ~1e-16.
		if t1 >= s*math.Sqrt(t2)*(1-1e-12) {
			// ρ(b) ≥ s ≥ ρ(a_m⁻): the root is λ = b + μ on this segment, with
			// the formula above written for the deviations a_i − b.
			den := fm - s*s
			mu := 0.0
			if den > 1e-12*fm {
				mu = (t1 - s*math.Sqrt(math.Max(fm*t2-t1*t1, 0)/den)) / fm
			}
			lambda = b + math.Min(math.Max(mu, 0), delta)
			found = true
			break
		}
	}
	if !found {
		lambda = 0
	}
	var n float64
	for i, v := range c {
		if t := math.Abs(v) - lambda; t > 0 {
			u[i] = math.Copysign(t, v)
			n += t * t
			ws.us = append(ws.us, i)
		}
	}
	n, ok := normalizeSupport(u, ws.us, n)
	if !ok {
		return 0, false
	}
	return n + lambda*s, true
}

// normalizeSupport makes u a unit vector when it is zero outside the
// indices us and n2 = Σ_{i∈us} u_i²:
//
//	u_i ← u_i / √n2  for i ∈ us
//
// It returns √n2, or 0 and false for an empty support (n2 = 0), leaving u
// unchanged.
func normalizeSupport(u []float64, us []int, n2 float64) (float64, bool) {
	if n2 == 0 {
		return 0, false
	}
	n := math.Sqrt(n2)
	for _, i := range us {
		u[i] /= n
	}
	return n, true
}

// refit replaces ws.x by the leading eigenvector of A_t restricted to the
// support of x, by power iteration from x (A_t is positive semidefinite, so
// the iteration converges to the largest eigenvalue of the block).
func (ws *Workspace) refit(tol float64, maxIter int) (int, bool, error) {
	n := 0
	for n < maxIter {
		ws.op.apply(ws.c, ws.x, ws.xs)
		var s float64
		for _, i := range ws.xs {
			s += ws.c[i] * ws.c[i]
		}
		if math.IsNaN(s) || math.IsInf(s, 0) {
			return n, false, ws.nonFinite()
		}
		if s == 0 {
			return n, true, nil
		}
		s = 1 / math.Sqrt(s)
		var step float64
		for _, i := range ws.xs {
			v := ws.c[i] * s
			d := v - ws.x[i]
			step += d * d
			ws.x[i] = v
		}
		n++
		if math.Sqrt(step) <= tol {
			return n, true, nil
		}
	}
	return n, false, nil
}
