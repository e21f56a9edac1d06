package tracker

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/stat/distuv"
)

// DefaultDriverLevel is the default significance level of the test that
// keeps a driver's slope (see [Drivers.SetLevel]): two-sided, 1 %.
const DefaultDriverLevel = 0.01

// MaxDriverTestChannels bounds the channels of a unit whose drivers'
// slopes are tested (the test costs O(p³) per run): a wider unit keeps
// every slope, as with the test off.
const MaxDriverTestChannels = 512

const (
	// driverSpan is the time constant, in frames, of the smoothing by
	// which the slope test measures each series' long-run variance (see
	// test): serial correlation up to about this many frames is seen.
	driverSpan = 256
	// driverStride: the smoothed frames are folded into their covariance
	// every driverStride frames (they change little in that time), so
	// Observe costs p²/(2·driverStride) multiply-adds per frame.
	driverStride = 8
	// driverTestCube: the graph is built at every Fit up to this many
	// channels, and at every ⌈(p/driverTestCube)³⌉-th Fit above (the
	// drivers each channel keeps are remembered in between), so that its
	// cost per frame stays about that of 64 channels.
	driverTestCube = 64
)

// driverLag holds the covariance of the exponentially smoothed frames of
// the tracker's channels, from which the slope test measures the serial
// correlation of any combination of channels (the rest comes from the
// tracker's covariance):
//
//	s(t) = s(t−1) + λ (x(t) − s(t−1)),  λ = 1/driverSpan
//	Sᵢⱼ  = E[(sᵢ − mᵢ)(sⱼ − mⱼ)]            (channel units squared)
//
// with m the tracker's current means, averaged over every driverStride-th
// learned frame with the step a = max(1 − μ^driverStride, 1/k) of the
// k-th (equal weights at first, then the tracker's forgetting μ). A
// missing value leaves its channel's s as it is; frames the tracker does
// not learn (frozen) are smoothed but not counted.
type driverLag struct {
	k     float64   // covariance updates so far
	phase float64   // learned frames since the last update
	since float64   // Fits since the graph was last built (see test)
	s     []float64 // p: smoothed frame, NaN before a channel's first value
	d     []float64 // upper triangle of S, row-major, p(p+1)/2
	u     []float64 // p: scratch, s − m
}

func newDriverLag(p int) *driverLag {
	l := &driverLag{s: make([]float64, p), u: make([]float64, p)}
	if p <= MaxDriverTestChannels {
		l.d = make([]float64, p*(p+1)/2)
	}
	for i := range l.s {
		l.s[i] = math.NaN()
	}
	return l
}

// Observe folds the frame x just learned by t (missing: nil or len p) into
// the statistics of the slope test. Call it after every Step of t, with
// the same frame. While t is frozen (the frame is not learned) it only
// smooths x. It allocates nothing. A unit of more than
// MaxDriverTestChannels channels has no test and nothing to observe.
func (d *Drivers) Observe(x []float64, missing []bool, t *Tracker) {
	if t.P() != d.p {
		panic("tracker: Drivers.Observe: width mismatch")
	}
	l, e := d.lag, t.ew
	if l.d == nil {
		return
	}
	const lambda = 1.0 / driverSpan
	for i, si := range l.s {
		if (missing == nil || !missing[i]) && !math.IsNaN(x[i]) {
			if math.IsNaN(si) {
				si = x[i]
			}
			l.s[i] = si + lambda*(x[i]-si)
		}
	}
	if t.Frozen() {
		return
	}
	if l.phase++; l.phase < driverStride {
		return
	}
	l.phase = 0
	for i, si := range l.s {
		l.u[i] = si - e.Mean(i)
	}
	l.k++
	a := math.Max(1-math.Pow(e.mu, driverStride), 1/l.k)
	n := d.p
	for i, ui := range l.u {
		if math.IsNaN(ui) {
			continue
		}
		row := l.d[i*n-i*(i-1)/2 : (i+1)*n-i*(i+1)/2] // columns i…p−1
		for j, uj := range l.u[i:] {
			if !math.IsNaN(uj) {
				row[j] += a * (ui*uj - row[j])
			}
		}
	}
}

// Lags returns the state of the slope test (its statistics and the
// drivers each channel keeps; a checkpoint saves it with
// [Drivers.Slopes], so that a restart tests the next regression as an
// uninterrupted run would).
func (d *Drivers) Lags() []float64 {
	l := d.lag
	out := make([]float64, 0, 3+len(l.s)+len(l.d)+len(d.keep))
	out = append(out, l.k, l.phase, l.since)
	out = append(out, l.s...)
	out = append(out, l.d...)
	for _, k := range d.keep {
		v := 0.0
		if k {
			v = 1
		}
		out = append(out, v)
	}
	return out
}

// SetLags restores the state saved by Lags. A state no run of Observe and
// Fit reaches (a count or phase out of range or not finite, an infinite
// smoothed value, a non-finite covariance entry, a keep flag other than 0
// or 1) is refused with ErrInput, and d is left as it was: a checkpoint is
// untrusted input, and a NaN there would spread into every slope.
func (d *Drivers) SetLags(s []float64) error {
	l := d.lag
	if n := 3 + len(l.s) + len(l.d) + len(d.keep); len(s) != n {
		return fmt.Errorf("%w: %d driver lag statistics, want %d", ErrWidth, len(s), n)
	}
	if err := checkLags(s, len(l.s), len(l.d)); err != nil {
		return err
	}
	l.k, l.phase, l.since = s[0], s[1], s[2]
	s = s[3:]
	s = s[copy(l.s, s):]
	s = s[copy(l.d, s):]
	for i, v := range s {
		d.keep[i] = v != 0
	}
	d.kept = true
	return nil
}

// checkLags checks a state of Lags with p smoothed values and nd
// covariance entries (see SetLags).
func checkLags(s []float64, p, nd int) error {
	finite := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
	switch {
	case !finite(s[0]) || s[0] < 0:
		return fmt.Errorf("%w: driver lag count %v", ErrInput, s[0])
	case !finite(s[1]) || s[1] < 0 || s[1] >= driverStride:
		return fmt.Errorf("%w: driver lag phase %v, want [0, %d)", ErrInput, s[1], driverStride)
	case !finite(s[2]) || s[2] < 0:
		return fmt.Errorf("%w: driver lag fits since the graph %v", ErrInput, s[2])
	}
	for i, v := range s[3 : 3+p] {
		if math.IsInf(v, 0) {
			return fmt.Errorf("%w: driver lag smoothed value %d is %v", ErrInput, i, v)
		}
	}
	for i, v := range s[3+p : 3+p+nd] {
		if !finite(v) {
			return fmt.Errorf("%w: driver lag covariance entry %d is %v", ErrInput, i, v)
		}
	}
	for i, v := range s[3+p+nd:] {
		if v != 0 && v != 1 {
			return fmt.Errorf("%w: driver lag keep flag %d is %v, want 0 or 1", ErrInput, i, v)
		}
	}
	return nil
}

// SetLevel sets the significance level of the slope test of Fit, in
// (0, 0.5); zero or negative keeps every slope untested. New drivers have
// [DefaultDriverLevel].
func (d *Drivers) SetLevel(level float64) {
	d.level = level
	clear(d.crits)
}

// test sets to 0 the slopes of own channels that the data show unrelated
// to the drivers. It builds the graph of the tracker's channels with an
// edge wherever a partial correlation (given all the other channels) is
// significant at d.level for the effective number of independent frames,
// or cannot be tested for too few of them; an own channel keeps the
// drivers in its connected component, refitted on those alone (one pass),
// and its other slopes are 0 (no driver in its component: all 0). With
// Ω = (A + εI)⁻¹ from the tracker's correlation A, S̃ the smoothed frames'
// covariance (driverLag) over the channels' standard deviations,
// λ = 1/driverSpan, and for channels i, j (ωᵢ the i-th column of Ω):
//
//	rᵢⱼ = −Ωᵢⱼ / √(ΩᵢᵢΩⱼⱼ)                        partial correlation
//	Rᵢ  = max(1, ωᵢᵀS̃ωᵢ / Ωᵢᵢ · (2 − λ)/λ)         long-run variance ratio of i's partial residual ωᵢᵀz
//	n*  = n / min(Rᵢ, Rⱼ)                          n: Kish's (Σw)²/Σw² of the weights
//	t   = rᵢⱼ √(n* − p) / √(1 − rᵢⱼ²)               edge when |t| ≥ t(1 − a/2; n* − p), or n* < p + 1
//
// with a = level/(p − 1), Bonferroni over the p − 1 edges of a channel, so
// that a channel unrelated to all the others is left alone with
// probability at least 1 − level.
// The t test of a partial correlation given p − 2 others has n − p
// degrees of freedom (Anderson 2003, An Introduction to Multivariate
// Statistical Analysis, §4.3; from memory), and n is Kish's effective
// size of the weights (Kish 1965, Survey Sampling). Serial correlation
// shrinks n: the variance of a correlation between two autocorrelated
// series is (1/n) Σₖ ρᵢ(k)ρⱼ(k) (Bartlett 1935, "Some aspects of the
// time-correlation problem in regard to tests of significance", J. Roy.
// Statist. Soc. 98; the effective number of degrees of freedom of
// Bretherton, Widmann, Dymnikov, Wallace & Bladé 1999, J. Climate 12,
// whose eq. 31 is its first-order autoregressive case,
// n(1 − ρᵢρⱼ)/(1 + ρᵢρⱼ)). When one series is much the smoother, its ρ
// stays near 1 over the other's correlation time and the sum is the
// other's Σₖ ρ(k) = R, its long-run variance over its variance; min(R)
// is that sum there and larger than it otherwise (fewer edges). R is
// measured, not modelled: an exponential smoothing of weight λ keeps
// λ/(2 − λ) of the variance of white noise and about R times that of a
// series whose correlation time is short against 1/λ (common practice,
// the EWMA chart's variance). The first-order form with ρ from lag 1
// was tried first and fails here: a partial residual of white noise and
// a small slow part has ρ(1) near 0 and a large Σₖ ρᵢ(k)ρⱼ(k) with a slow
// partner, and chance partial correlations passed (README, Drivers).
//
// Why components: in a Gaussian graphical model channels in different
// connected components of the partial-correlation graph are independent
// (the global Markov property; Lauritzen 1996, Graphical Models, §3.2.1),
// so own channel i's slope A_ic A_cc⁻¹ on the drivers is 0 when no
// driver shares its component. Partial correlations see a weak driver
// where a marginal test cannot: a flow that follows a demand cycle far
// more than a pressure setpoint is tied to the setpoint once the channels
// carrying the demand are conditioned on. A false edge only keeps a
// slope, as without the test.
//
// The graph costs O(p³): it is built at every Fit up to driverTestCube
// channels and at every ⌈(p/driverTestCube)³⌉-th above, the drivers each
// channel keeps remembered in between; a unit of more than
// MaxDriverTestChannels channels keeps every slope.
func (d *Drivers) test(t *Tracker) {
	if !(d.level > 0) || d.lag.d == nil {
		return
	}
	every := math.Ceil(math.Pow(float64(d.p)/driverTestCube, 3))
	if d.lag.since++; !d.kept || d.lag.since >= every {
		d.lag.since = 0
		if !d.graph(t) {
			return
		}
		d.kept = true
	}
	c := len(d.ctx)
	for r, i := range d.own {
		row, keep := d.b[r*c:(r+1)*c], d.keep[r*c:(r+1)*c]
		kept := 0
		for _, k := range keep {
			if k {
				kept++
			}
		}
		switch {
		case kept == 0:
			clear(row)
		case kept < c:
			d.refitRow(row, i, keep)
		}
	}
}

// graph builds the graph of test and marks in d.keep the drivers in each
// own channel's component. It reports false (d.keep as it was) when the
// correlation cannot be inverted.
func (d *Drivers) graph(t *Tracker) bool {
	p, e, l := d.p, t.ew, d.lag
	// Ω in d.omega (d.work is overwritten).
	for i := range p {
		for j := range p {
			d.work[i*p+j] = d.corr.At(i, j)
		}
		d.work[i*p+i] += t.cfg.Ridge
		if d.work[i*p+i] <= t.cfg.Ridge {
			d.work[i*p+i] = 1 // without variance: unrelated to anything
		}
	}
	if !invert(d.omega, d.work, p) {
		return false
	}
	// d.dmat ← S̃ (S over the standard deviations), then d.work ← S̃ Ω.
	for i := range p {
		d.rho[i] = 0 // scratch: 1/σᵢ
		if v := e.Var(i); v > 0 {
			d.rho[i] = 1 / math.Sqrt(v)
		}
	}
	for i := range p {
		for j := i; j < p; j++ {
			v := l.at(i, j, p) * d.rho[i] * d.rho[j]
			d.dmat[i*p+j], d.dmat[j*p+i] = v, v
		}
	}
	// Symm, not Gemm: gonum's Gemm runs large products on goroutines.
	blas64.Symm(blas.Left, 1, blas64.Symmetric{N: p, Stride: p, Data: d.dmat, Uplo: blas.Upper},
		blas64.General{Rows: p, Cols: p, Stride: p, Data: d.omega}, 0, blas64.General{Rows: p, Cols: p, Stride: p, Data: d.work})
	const lambda = 1.0 / driverSpan
	for i := range p {
		num := 0.0
		for k := range p {
			num += d.omega[k*p+i] * d.work[k*p+i]
		}
		d.rho[i] = 1 // here: the long-run variance ratio Rᵢ
		if den := d.omega[i*p+i]; l.k > 0 && den > 0 {
			d.rho[i] = math.Max(1, num/den*(2-lambda)/lambda)
		}
		d.comp[i] = i
	}
	for i := range p {
		for j := i + 1; j < p; j++ {
			if d.find(i) == d.find(j) {
				continue
			}
			r := -d.omega[i*p+j] / math.Sqrt(d.omega[i*p+i]*d.omega[j*p+j])
			if r == 0 || math.IsNaN(r) {
				continue
			}
			n := math.Min(e.NEff(i), e.NEff(j))
			df := n/math.Min(d.rho[i], d.rho[j]) - float64(p)
			if df < 1 || r*r >= 1 || math.Abs(r)*math.Sqrt(df/(1-r*r)) >= d.crit(df) {
				d.comp[d.find(i)] = d.find(j)
			}
		}
	}
	c := len(d.ctx)
	for r, i := range d.own {
		for a, j := range d.ctx {
			d.keep[r*c+a] = d.find(i) == d.find(j)
		}
	}
	return true
}

// at returns Dᵢⱼ from the upper triangle.
func (l *driverLag) at(i, j, p int) float64 {
	if i > j {
		i, j = j, i
	}
	return l.d[i*p-i*(i-1)/2+j-i]
}

// find returns the root of channel i's component (path halving).
func (d *Drivers) find(i int) int {
	for d.comp[i] != i {
		d.comp[i] = d.comp[d.comp[i]]
		i = d.comp[i]
	}
	return i
}

// crit returns Student's t quantile 1 − a/2, a = level/(p − 1), on ⌊df⌋ degrees of freedom
// (at most len(d.crits) − 1: a larger df uses that quantile, a little
// higher than its own), cached.
func (d *Drivers) crit(df float64) float64 {
	k := min(int(df), len(d.crits)-1)
	if d.crits[k] == 0 {
		a := d.level / float64(max(d.p-1, 1)) // Bonferroni over a channel's p − 1 edges
		d.crits[k] = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(k)}.Quantile(1 - a/2)
	}
	return d.crits[k]
}

// refitRow writes into row the regression of own channel i on the drivers
// marked in keep (the others 0), from d.corr and the ridged A_cc of Fit.
func (d *Drivers) refitRow(row []float64, i int, keep []bool) {
	idx := d.sub[:0]
	for a, k := range keep {
		if k {
			idx = append(idx, a)
		}
	}
	m := len(idx)
	acc, inv := d.subAcc[:m*m], d.subInv[:m*m]
	for x, a := range idx {
		for y, b := range idx {
			acc[x*m+y] = d.acc0[a*len(d.ctx)+b]
		}
	}
	clear(row)
	if !invert(inv, acc, m) {
		return
	}
	for y, b := range idx {
		s := 0.0
		for x, a := range idx {
			s += d.corr.At(i, d.ctx[a]) * inv[x*m+y]
		}
		row[b] = s
	}
}

// clampRho bounds an estimated lag-1 autocorrelation to [−1, 1).
func clampRho(r float64) float64 {
	if math.IsNaN(r) {
		return 0
	}
	return math.Max(-1, math.Min(r, 1-1e-12))
}
