package modes

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Defaults of Config.
const (
	DefaultShare     = 0.80 // Share when Count and Share are both 0
	DefaultMaxCount  = 10   // MaxCount cap for the automatic count (and at most p)
	DefaultColdEvery = 10   // ColdEvery when 0
	DefaultMatchMin  = 0.5  // MatchMin when 0: |cos| ≥ 0.5, within 60°
)

// Config configures a Set. The zero value means: dense modes (ordinary
// principal components), as many as needed for DefaultShare of the total
// variance, at most DefaultMaxCount, projection deflation.
type Config struct {
	// Sparsity per mode, in extraction order; a single entry applies to
	// every mode, none means Dense. With more than one entry there must be
	// one per mode (Count, or MaxCount with the automatic count).
	Sparsity []Sparsity
	// Count is the fixed number of modes r; fewer are kept when the deflated
	// matrix has no variance left or a penalty leaves a mode empty. 0 means
	// choose by Share.
	Count int
	// Share (0 < Share ≤ 1) with Count == 0: the smallest r whose cumulative
	// adjusted variance reaches Share·tr(A); default DefaultShare.
	Share float64
	// MaxCount caps the automatic count; default min(p, DefaultMaxCount), or
	// len(Sparsity) when that is above 1.
	MaxCount int
	// MinCount, with the automatic count, is the fewest modes the Share rule
	// may stop at: the count goes on past Share until MinCount modes are
	// kept, still within MaxCount, MinAdjusted and the residual cap (so it
	// is a floor on the Share rule, never on those). 0 (the default): no
	// floor. Operating states of one unit use it so that each state keeps
	// as many modes as the richest state (channels the state does not move
	// then stay in the modes of every state, not in one state's residual).
	MinCount int
	// MinAdjusted: with the automatic count and MinAdjusted > 0, a mode
	// after the first is kept only while its AdjustedVariance exceeds
	// MinAdjusted times the average variance of a channel with nonzero
	// variance (1 on a correlation matrix): 1 is Kaiser's rule, 0.7
	// Jolliffe's variant; 0 (the default) leaves the count to Share and
	// MaxCount. Whatever the setting, the automatic count leaves at least
	// one residual dimension (r ≤ pin − 1, pin the channels with nonzero
	// variance), so SPE and its limit stay finite (see residualCap).
	// Measured on the demo plant (README), Kaiser's rule cut the modes from
	// 4–10 to 1–3 per unit and lost detections, so it is not the default.
	MinAdjusted float64
	// Deflation between modes; default Projection.
	Deflation Deflation
	// Tol and MaxIter: stopping rules of every solve, see Options.
	Tol     float64
	MaxIter int
	// ColdEvery: every ColdEvery-th Refresh also solves every mode from the
	// cold start and keeps, per mode, the result with the larger objective
	// (ties: the warm one), so a stale support cannot persist. This matters
	// most for LogPen and ExpPen, whose zero loadings are sticky from a warm
	// start. A cold pass reads all of A (O(p²) per mode). 0 means
	// DefaultColdEvery; negative means never (after the first Refresh).
	ColdEvery int
	// Start, Refit and EpsStages: see Options.
	Start     Start
	Refit     Refit
	EpsStages int
	// MatchMin: a new mode inherits the ID of the old mode it is matched to
	// only if |cos| between their loadings is at least MatchMin; otherwise it
	// gets a new ID. Default DefaultMatchMin.
	MatchMin float64
}

// Mode describes one mode of a [Set]. Its slices view the Set's storage:
// read-only, valid until the next Refresh or UnmarshalBinary.
type Mode struct {
	// ID is the stable identity: a new mode takes the ID of the previous
	// mode its loadings match best by |cosine| (greedy, best pair first),
	// so an ID names the same group of sensors across refreshes.
	ID int
	// Support lists the channels with nonzero loadings, ascending.
	Support []int
	// Loadings is the unit loading vector (length p), sign fixed so that the
	// largest-magnitude loading is positive.
	Loadings []float64
	// Variance is xᵀAx on the matrix given to Refresh (the variance of the
	// mode's score); DeflatedVariance is xᵀA_jx on the deflated matrix the
	// mode was extracted from. Both in the units of A.
	Variance, DeflatedVariance float64
	// AdjustedVariance is R_jj², R the upper Cholesky factor of VᵀAV over the
	// modes in extraction order (Zou, Hastie & Tibshirani 2006): the variance
	// this mode adds beyond the earlier ones. Units of A.
	AdjustedVariance float64
	// Objective is the value of the mode's sparse problem (see Result).
	Objective float64
	// Iterations counts the solver steps of the kept solution (ConGradU steps
	// plus refit steps); Converged reports a stopping rule fired; Cold
	// reports the kept solution came from the cold start.
	Iterations int
	Converged  bool
	Cold       bool
}

type modeSet struct {
	r    int
	x    [][]float64
	supp [][]int
	pre  [][]float64 // solver iterate before the refit: the warm start
	id   []int
	res  []Result
	vari []float64 // xᵀA_0x
	adj  []float64
	g    []float64 // VᵀA_0V, m × m row-major
	rch  []float64 // upper Cholesky factor of g
	v    *mat.Dense
	view []*mat.Dense // view[r] = p × r slice of v, view[0] = nil
}

func newModeSet(p, m int) *modeSet {
	s := &modeSet{
		x:    make([][]float64, m),
		supp: make([][]int, m),
		pre:  make([][]float64, m),
		id:   make([]int, m),
		res:  make([]Result, m),
		vari: make([]float64, m),
		adj:  make([]float64, m),
		g:    make([]float64, m*m),
		rch:  make([]float64, m*m),
		v:    mat.NewDense(p, m, nil),
		view: make([]*mat.Dense, m+1),
	}
	for j := 0; j < m; j++ {
		s.x[j] = make([]float64, p)
		s.pre[j] = make([]float64, p)
		s.supp[j] = make([]int, 0, p)
		s.view[j+1] = s.v.Slice(0, p, 0, j+1).(*mat.Dense)
	}
	return s
}

// Set holds r sparse modes of a changing covariance matrix from one
// refresh to the next: [Set.Refresh] solves each mode again from its
// previous loadings (warm start) and keeps its identity and sign. After
// construction Refresh does not allocate. A Set is not safe for
// concurrent use.
type Set struct {
	p         int
	cfg       Config
	sp        []Sparsity // one per slot
	slots     int
	auto      bool
	opt       Options
	ws        *Workspace
	cur, nxt  *modeSet
	have      bool
	coldNext  bool
	refreshes int
	nextID    int
	trace     float64
	iters     int
	undo      setUndo // what the last successful Refresh replaced (Revert)

	ax0      []float64
	bx, bc   []float64
	bpre     []float64
	bxs      []int
	bpreS    []int
	cosm     []float64
	usedOld  []bool
	usedNew  []bool
	matchOld []int
}

// configErr is an ErrConfig error with its reason.
func configErr(format string, a ...any) error {
	return fmt.Errorf("%w: %s", ErrConfig, fmt.Sprintf(format, a...))
}

// countDefaults checks the number of modes of cfg for p channels and fills
// its defaults (Share and MaxCount for an automatic count, MaxCount for a
// fixed one). It returns the number of mode slots and whether the count is
// automatic.
func (cfg *Config) countDefaults(p int) (slots int, auto bool, err error) {
	if cfg.Count < 0 || cfg.Count > p {
		return 0, false, configErr("Count = %d outside [0, p = %d]", cfg.Count, p)
	}
	if cfg.MaxCount < 0 || cfg.MaxCount > p {
		return 0, false, configErr("MaxCount = %d outside [0, p = %d]", cfg.MaxCount, p)
	}
	ns := len(cfg.Sparsity)
	auto = cfg.Count == 0
	if auto {
		if cfg.Share == 0 {
			cfg.Share = DefaultShare
		}
		if !(cfg.Share > 0 && cfg.Share <= 1) {
			return 0, false, configErr("Share = %g outside (0, 1]", cfg.Share)
		}
		if cfg.MaxCount == 0 {
			cfg.MaxCount = min(p, DefaultMaxCount)
			if ns > 1 {
				cfg.MaxCount = ns
			}
		}
		if cfg.MaxCount > p {
			return 0, false, configErr("%d sparsity entries for p = %d channels", ns, p)
		}
		slots = cfg.MaxCount
		if cfg.MinCount < 0 {
			return 0, false, configErr("MinCount = %d, want ≥ 0", cfg.MinCount)
		}
		if !(cfg.MinAdjusted >= 0) || math.IsInf(cfg.MinAdjusted, 0) {
			return 0, false, configErr("MinAdjusted = %g, want finite ≥ 0", cfg.MinAdjusted)
		}
	} else {
		if cfg.Share != 0 || cfg.MinCount != 0 {
			return 0, false, configErr("Share = %g and MinCount = %d are only used with Count = 0", cfg.Share, cfg.MinCount)
		}
		if cfg.MaxCount == 0 {
			cfg.MaxCount = cfg.Count
		}
		if cfg.MaxCount < cfg.Count {
			return 0, false, configErr("MaxCount = %d below Count = %d", cfg.MaxCount, cfg.Count)
		}
		slots = cfg.Count
	}
	return slots, auto, nil
}

// slotSparsity checks cfg.Sparsity (one entry for all modes, or one per
// slot) and returns the sparsity of each slot.
func (cfg *Config) slotSparsity(p, slots int) ([]Sparsity, error) {
	ns := len(cfg.Sparsity)
	if ns > 1 && ns != slots {
		return nil, configErr("%d sparsity entries for %d modes (give 1 or one per mode)", ns, slots)
	}
	sp := make([]Sparsity, slots)
	for j := range sp {
		switch {
		case ns == 1:
			sp[j] = cfg.Sparsity[0]
		case ns > 1:
			sp[j] = cfg.Sparsity[j]
		}
		if err := sp[j].check(p, math.Inf(1)); err != nil {
			return nil, fmt.Errorf("mode %d: %w", j+1, err)
		}
	}
	return sp, nil
}

// solverDefaults checks the iteration settings of cfg and fills their
// defaults.
func (cfg *Config) solverDefaults() error {
	if cfg.Deflation != Projection && cfg.Deflation != Schur {
		return configErr("unknown deflation %d", int(cfg.Deflation))
	}
	if math.IsNaN(cfg.Tol) || cfg.Tol < 0 || math.IsInf(cfg.Tol, 0) {
		return configErr("Tol = %g, want finite ≥ 0", cfg.Tol)
	}
	if cfg.Tol == 0 {
		cfg.Tol = DefaultTol
	}
	if cfg.MaxIter < 0 {
		return configErr("MaxIter = %d, want ≥ 0", cfg.MaxIter)
	}
	if cfg.MaxIter == 0 {
		cfg.MaxIter = DefaultMaxIter
	}
	if cfg.ColdEvery == 0 {
		cfg.ColdEvery = DefaultColdEvery
	}
	if cfg.EpsStages < 0 {
		return configErr("EpsStages = %d, want ≥ 0", cfg.EpsStages)
	}
	if cfg.Start < StartAuto || cfg.Start > StartIndex {
		return configErr("unknown start %d", int(cfg.Start))
	}
	if cfg.Refit < RefitAuto || cfg.Refit > RefitNever {
		return configErr("unknown refit %d", int(cfg.Refit))
	}
	if cfg.MatchMin == 0 {
		cfg.MatchMin = DefaultMatchMin
	}
	if !(cfg.MatchMin > 0 && cfg.MatchMin <= 1) {
		return configErr("MatchMin = %g outside (0, 1]", cfg.MatchMin)
	}
	return nil
}

// NewSet returns a mode set for p × p matrices; cfg is validated and its
// defaults filled in. Errors wrap ErrConfig or ErrSparsity.
func NewSet(p int, cfg Config) (*Set, error) {
	if p < 1 {
		return nil, configErr("dimension p = %d, want ≥ 1", p)
	}
	slots, auto, err := cfg.countDefaults(p)
	if err != nil {
		return nil, err
	}
	sp, err := cfg.slotSparsity(p, slots)
	if err != nil {
		return nil, err
	}
	if err := cfg.solverDefaults(); err != nil {
		return nil, err
	}
	cfg.Sparsity = sp
	m := cfg.MaxCount
	t := &Set{
		p:        p,
		cfg:      cfg,
		sp:       sp,
		slots:    slots,
		auto:     auto,
		opt:      Options{Tol: cfg.Tol, MaxIter: cfg.MaxIter, Start: cfg.Start, Refit: cfg.Refit, EpsStages: cfg.EpsStages},
		ws:       newWorkspace(p, m),
		cur:      newModeSet(p, m),
		nxt:      newModeSet(p, m),
		ax0:      make([]float64, p),
		bx:       make([]float64, p),
		bc:       make([]float64, p),
		bxs:      make([]int, 0, p),
		bpre:     make([]float64, p),
		bpreS:    make([]int, 0, p),
		cosm:     make([]float64, m*m),
		usedOld:  make([]bool, m),
		usedNew:  make([]bool, m),
		matchOld: make([]int, m),
	}
	t.ws.op.defl = cfg.Deflation
	return t, nil
}

// Config returns the configuration with defaults filled in (Sparsity has one
// entry per mode slot).
func (t *Set) Config() Config {
	c := t.cfg
	c.Sparsity = append([]Sparsity(nil), t.cfg.Sparsity...)
	return c
}

// Count returns the current number of modes r.
func (t *Set) Count() int { return t.cur.r }

// Loadings returns the p × r matrix whose column j is the loadings of
// Mode(j), or nil when there are no modes. It is a read-only view, valid
// until the next Refresh.
func (t *Set) Loadings() *mat.Dense { return t.cur.view[t.cur.r] }

// Mode returns mode j (0 ≤ j < Count()), in extraction order. It panics if
// j is out of range.
func (t *Set) Mode(j int) Mode {
	s := t.cur
	if j < 0 || j >= s.r {
		panic("modes: mode index out of range")
	}
	r := s.res[j]
	return Mode{
		ID:               s.id[j],
		Support:          s.supp[j],
		Loadings:         s.x[j],
		Variance:         s.vari[j],
		DeflatedVariance: r.Variance,
		AdjustedVariance: s.adj[j],
		Objective:        r.Objective,
		Iterations:       r.Iterations + r.RefitIterations,
		Converged:        r.Converged,
		Cold:             r.Cold,
	}
}

// ScoreCovTo fills dst (r × r; an empty dst is resized) with VᵀAV, the
// covariance of the mode scores VᵀX under the matrix of the last Refresh.
// Sparse loadings are not orthogonal, so it is not diagonal.
func (t *Set) ScoreCovTo(dst *mat.SymDense) {
	r, m := t.cur.r, t.cfg.MaxCount
	if dst.IsEmpty() {
		dst.ReuseAsSym(r)
	}
	if dst.SymmetricDim() != r {
		panic("modes: ScoreCovTo dimension mismatch")
	}
	for i := 0; i < r; i++ {
		for j := i; j < r; j++ {
			dst.SetSym(i, j, t.cur.g[i*m+j])
		}
	}
}

// TotalVariance returns tr(A) of the last Refresh.
func (t *Set) TotalVariance() float64 { return t.trace }

// Iterations returns the total solver steps of the last Refresh, including
// the cold candidates that were discarded.
func (t *Set) Iterations() int { return t.iters }

// ColdNext makes the next Refresh solve every mode from the cold start
// only, without a warm candidate. Identities are still matched to the
// current modes.
func (t *Set) ColdNext() { t.coldNext = true }

// setUndo is the state a successful Refresh replaced besides the modes
// themselves (those stay in Set.nxt until the next Refresh).
type setUndo struct {
	ok                       bool
	have, coldNext           bool
	refreshes, nextID, iters int
	trace                    float64
}

// Revert undoes the last successful Refresh: the modes, their identities,
// the warm starts of the next Refresh and the counters return to what they
// were before it. A caller that cannot use what a Refresh found (no modes
// at all, say) reverts to keep its previous modes whole. It reports false,
// changing nothing, if there is no Refresh to undo: none yet, or already
// reverted, or the modes were restored by UnmarshalBinary since. It does
// not allocate.
func (t *Set) Revert() bool {
	u := t.undo
	if !u.ok {
		return false
	}
	t.cur, t.nxt = t.nxt, t.cur
	t.have, t.coldNext = u.have, u.coldNext
	t.refreshes, t.nextID, t.iters, t.trace = u.refreshes, u.nextID, u.iters, u.trace
	t.undo = setUndo{}
	return true
}

// Refresh recomputes the modes for a new matrix a (p × p, symmetric positive
// semidefinite), each warm-started from its previous loadings. On an error
// the previous modes are kept unchanged. It does not allocate.
//
// Validation reads the diagonal (negative: ErrNotPSD; NaN/Inf:
// ErrNotFinite; zero trace: ErrZeroMatrix) and every product with a is
// checked, so a non-finite entry in any column the solvers touch is an
// ErrNotFinite; a cold refresh (the first one, and every ColdEvery-th)
// reads all of a. Full positive semidefiniteness is assumed, not checked.
func (t *Set) Refresh(a *mat.SymDense) error {
	if a.SymmetricDim() != t.p {
		return fmt.Errorf("%w: matrix is %d × %d, mode set has p = %d", ErrConfig, a.SymmetricDim(), a.SymmetricDim(), t.p)
	}
	ws, op := t.ws, t.ws.op
	op.setMatrix(a)
	maxDiag, trace, err := ws.checkDiag()
	if err != nil {
		return err
	}
	for j, sp := range t.sp {
		if err := sp.check(t.p, maxDiag); err != nil {
			return fmt.Errorf("mode %d: %w", j+1, err)
		}
	}
	warm := t.have && !t.coldNext
	tryCold := !warm || (t.cfg.ColdEvery > 0 && (t.refreshes+1)%t.cfg.ColdEvery == 0)
	if tryCold && !op.baseColumnNorms(ws.cn) {
		return ws.nonFinite()
	}
	m := t.cfg.MaxCount
	nx := t.nxt
	nx.r = 0
	iters := 0
	var cum float64
	// The automatic count keeps a residual space (see residualCap).
	pin := 0
	for i := 0; i < t.p; i++ {
		if op.diag(i) > 0 {
			pin++
		}
	}
	capR, minAdj := residualCap(pin, trace, t.cfg.MinAdjusted)
	for j := 0; j < t.slots; j++ {
		res, stop, err := t.solveSlot(j, warm, tryCold, &iters)
		if err != nil {
			return err
		}
		if stop || res.Empty {
			break
		}
		adj := t.keep(nx, j, res)
		if t.auto && j > 0 && (j+1 > capR || !(adj > minAdj)) {
			break // Kaiser's rule or the residual minimum: not kept
		}
		nx.r = j + 1
		cum += adj
		x := nx.x[j]
		if t.auto && cum >= t.cfg.Share*trace && j+1 >= t.cfg.MinCount {
			break
		}
		if j+1 == t.slots {
			break
		}
		// Deflate; y = A_t x is in ws.c.
		f := res.Variance
		if !(f > 0) {
			break
		}
		if tryCold {
			op.apply(ws.e, ws.c, nil) // z = A_t y
			deflateColumnNorms(ws.cn, op.defl, x, ws.c, ws.e, f)
		}
		if op.defl == Schur {
			op.pushSchur(x, nx.supp[j], ws.c, f)
		} else {
			op.pushProjection(x, nx.supp[j])
		}
	}
	for i := range ws.e {
		ws.e[i] = 0
	}
	t.undo = setUndo{ok: true, have: t.have, coldNext: t.coldNext,
		refreshes: t.refreshes, nextID: t.nextID, iters: t.iters, trace: t.trace}
	t.matchIDs(nx)
	nx.fillLoadings(t.p, m)
	t.cur, t.nxt = nx, t.cur
	t.have = true
	t.coldNext = false
	t.refreshes++
	t.trace = trace
	t.iters = iters
	return nil
}

// solveSlot solves for mode slot j of a refresh: from the warm start of
// the current mode j (when warm), from a cold start (when tryCold, there is
// no warm start, or a penalty emptied the warm one), keeping the better of
// the two. It adds the iterations to *iters; stop says the operator has no
// more modes to give.
func (t *Set) solveSlot(j int, warm, tryCold bool, iters *int) (res Result, stop bool, err error) {
	ws := t.ws
	sp := t.sp[j]
	hasWarm := warm && j < t.cur.r
	if hasWarm {
		res, err = ws.solve(sp, &t.opt, t.cur.pre[j], false, t.cur.x[j], t.cur.supp[j])
		*iters += res.Iterations + res.RefitIterations
		if err == errEmptyOperator {
			return res, true, nil
		}
		if err != nil {
			return res, false, err
		}
	}
	// A warm start that a penalty empties may still hold a mode from the
	// cold start.
	if !hasWarm || tryCold || res.Empty {
		if hasWarm {
			copy(t.bx, ws.x)
			copy(t.bc, ws.c)
			copy(t.bpre, ws.pre)
			t.bxs = append(t.bxs[:0], ws.xs...)
			t.bpreS = append(t.bpreS[:0], ws.preS...)
		}
		if !tryCold && !ws.deflatedNorms() {
			// Column norms are kept up to date only on cold passes.
			return res, false, ws.nonFinite()
		}
		rc, err := ws.solve(sp, &t.opt, nil, true, nil, nil)
		*iters += rc.Iterations + rc.RefitIterations
		switch {
		case err == errEmptyOperator:
			stop = true
		case err != nil:
			return res, false, err
		}
		if hasWarm && (stop || rc.Empty || (!res.Empty && res.Objective >= rc.Objective)) {
			copy(ws.x, t.bx)
			copy(ws.c, t.bc)
			copy(ws.pre, t.bpre)
			ws.xs = append(ws.xs[:0], t.bxs...)
			ws.preS = append(ws.preS[:0], t.bpreS...)
			stop = false
		} else if !stop {
			res = rc
		}
	}
	return res, stop, nil
}

// keep stores the solution in the workspace as mode j of nx (with its
// result res), adds row j of G = VᵀA_0V and the next column of G's
// Cholesky factor, and returns the mode's adjusted variance; the caller
// decides whether the mode counts (nx.r).
func (t *Set) keep(nx *modeSet, j int, res Result) float64 {
	ws, op, m := t.ws, t.ws.op, t.cfg.MaxCount
	x := nx.x[j]
	copy(x, ws.x)
	nx.supp[j] = append(nx.supp[j][:0], ws.xs...)
	copy(nx.pre[j], ws.pre)
	nx.res[j] = res
	saveT := op.t
	op.t = 0
	op.apply(t.ax0, x, nx.supp[j])
	op.t = saveT
	for i := 0; i <= j; i++ {
		nx.g[i*m+j] = dotSupp(nx.x[i], t.ax0, nx.supp[i])
		nx.g[j*m+i] = nx.g[i*m+j]
	}
	nx.vari[j] = nx.g[j*m+j]
	nx.adj[j] = cholColumn(nx.rch, nx.g, m, j)
	return nx.adj[j]
}

// fillLoadings writes the p × m loadings matrix of s from its sparse modes
// (zero beyond its r modes and outside their supports).
func (s *modeSet) fillLoadings(p, m int) {
	raw := s.v.RawMatrix()
	for i := 0; i < p; i++ {
		row := raw.Data[i*raw.Stride : i*raw.Stride+m]
		for j := range row {
			row[j] = 0
		}
	}
	for j := 0; j < s.r; j++ {
		for _, i := range s.supp[j] {
			raw.Data[i*raw.Stride+j] = s.x[j][i]
		}
	}
}

// cholColumn computes column j of the upper Cholesky factor R of g (m × m
// row-major, rows and columns 0..j filled) into r, given columns 0..j−1,
// and returns R_jj². A dependent column (R_jj² ≤ 0 after rounding) gives 0.
func cholColumn(r, g []float64, m, j int) float64 {
	for i := 0; i < j; i++ {
		s := g[i*m+j]
		for l := 0; l < i; l++ {
			s -= r[l*m+i] * r[l*m+j]
		}
		if d := r[i*m+i]; d > 0 {
			r[i*m+j] = s / d
		} else {
			r[i*m+j] = 0
		}
	}
	s := g[j*m+j]
	for l := 0; l < j; l++ {
		s -= r[l*m+j] * r[l*m+j]
	}
	if !(s > 0) {
		r[j*m+j] = 0
		return 0
	}
	r[j*m+j] = math.Sqrt(s)
	return s
}

// matchIDs gives the modes of nx the IDs of the current modes they match
// best by |cosine| (greedy: the best remaining pair first, ties by lowest
// new then lowest old index), new IDs when |cos| < MatchMin.
func (t *Set) matchIDs(nx *modeSet) {
	old := t.cur
	ro, rn, m := 0, nx.r, t.cfg.MaxCount
	if t.have {
		ro = old.r
	}
	for j := 0; j < rn; j++ {
		t.usedNew[j] = false
		for i := 0; i < ro; i++ {
			t.cosm[j*m+i] = math.Abs(dotSupp(nx.x[j], old.x[i], nx.supp[j]))
		}
	}
	for i := 0; i < ro; i++ {
		t.usedOld[i] = false
	}
	for {
		bj, bi, bv := -1, -1, -1.0
		for j := 0; j < rn; j++ {
			if t.usedNew[j] {
				continue
			}
			for i := 0; i < ro; i++ {
				if !t.usedOld[i] && t.cosm[j*m+i] > bv {
					bj, bi, bv = j, i, t.cosm[j*m+i]
				}
			}
		}
		if bj < 0 || bv < t.cfg.MatchMin {
			break
		}
		t.usedNew[bj], t.usedOld[bi] = true, true
		nx.id[bj] = old.id[bi]
	}
	for j := 0; j < rn; j++ {
		if !t.usedNew[j] {
			t.nextID++
			nx.id[j] = t.nextID
		}
	}
}

// residualCap returns the automatic count's cap on the number of modes of
// a matrix with pin channels of nonzero variance and trace tr, and the
// adjusted variance a mode must exceed to be kept after the first.
//
// Rule, when rel > 0 (Kaiser 1960, "The application of electronic computers to factor
// analysis", Educ. Psychol. Meas. 20:141–151; Jolliffe 2002, Principal
// Component Analysis, 2nd ed., §6.1.2): keep a mode only while the variance
// it adds beyond the earlier ones exceeds the average variance of one
// channel, tr/pin (1 on a correlation matrix), times rel (Jolliffe
// suggests 0.7 to keep a little more). For dense modes the adjusted
// variance is the eigenvalue and at most pin − 1 eigenvalues of a
// pin-channel matrix can exceed their mean, so the rule alone leaves a
// residual; sparse modes carry no such guarantee, hence the explicit cap
// r ≤ pin − 1 as well. The first mode is always kept. With the residual
// never empty, SPE and its limit stay finite.
func residualCap(pin int, tr, rel float64) (capR int, minAdj float64) {
	if pin < 2 {
		return 1, math.Inf(-1)
	}
	if rel <= 0 {
		return pin - 1, math.Inf(-1)
	}
	return pin - 1, rel * tr / float64(pin)
}
