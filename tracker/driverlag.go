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

// driverSpan is the time constant, in frames, of the smoothing by which
// the slope test measures each series' long-run variance (see test): serial
// correlation up to about this many frames is seen.
const driverSpan = 256

// driverLag holds the covariance of the exponentially smoothed frames of
// the tracker's channels, from which the slope test measures the serial
// correlation of any combination of channels (the rest comes from the
// tracker's covariance):
//
//	s(t) = s(t−1) + λ (x(t) − s(t−1)),  λ = 1/driverSpan
//	Sᵢⱼ  = E[(sᵢ − mᵢ)(sⱼ − mⱼ)]            (channel units squared)
//
// with m the tracker's current means, averaged with the step
// a = max(1 − μ, 1/k) of the k-th frame (equal weights at first, then the
// tracker's forgetting μ). A missing value leaves its channel's s as it
// is; frames the tracker does not learn (frozen) are smoothed but not
// counted.
type driverLag struct {
	k float64   // frames counted
	s []float64 // p: smoothed frame, NaN before a channel's first value
	d []float64 // upper triangle of S, row-major, p(p+1)/2
	u []float64 // p: scratch, s − m
}

func newDriverLag(p int) *driverLag {
	l := &driverLag{s: make([]float64, p), d: make([]float64, p*(p+1)/2), u: make([]float64, p)}
	for i := range l.s {
		l.s[i] = math.NaN()
	}
	return l
}

// Observe folds the frame x just learned by t (missing: nil or len p) into
// the statistics of the slope test. Call it after every Step of t, with
// the same frame. While t is frozen (the frame is not learned) it only
// smooths x. It allocates nothing; its cost is p²/2 multiply-adds.
func (d *Drivers) Observe(x []float64, missing []bool, t *Tracker) {
	if t.P() != d.p {
		panic("tracker: Drivers.Observe: width mismatch")
	}
	l, e := d.lag, t.ew
	const lambda = 1.0 / driverSpan
	for i, si := range l.s {
		if (missing == nil || !missing[i]) && !math.IsNaN(x[i]) {
			if math.IsNaN(si) {
				si = x[i]
			}
			l.s[i] = si + lambda*(x[i]-si)
		}
		l.u[i] = l.s[i] - e.Mean(i)
	}
	if t.Frozen() {
		return
	}
	l.k++
	a := math.Max(1-e.mu, 1/l.k)
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

// Lags returns the state of the slope test's statistics (a checkpoint
// saves it with [Drivers.Slopes], so that a restart tests the next
// regression on the same statistics).
func (d *Drivers) Lags() []float64 {
	l := d.lag
	out := make([]float64, 0, 1+len(l.s)+len(l.d))
	out = append(out, l.k)
	out = append(out, l.s...)
	return append(out, l.d...)
}

// SetLags restores the state saved by Lags.
func (d *Drivers) SetLags(s []float64) error {
	l := d.lag
	if n := 1 + len(l.s) + len(l.d); len(s) != n {
		return fmt.Errorf("%w: %d driver lag statistics, want %d", ErrWidth, len(s), n)
	}
	l.k = s[0]
	copy(l.s, s[1:])
	copy(l.d, s[1+len(l.s):])
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
// and its other slopes are 0 (no driver in its component: all 0).
//
// With Ω = (A + εI)⁻¹ from the tracker's correlation A, D̃ the
// difference covariance over the standard deviations, and for channels
// i, j:
//
//	rᵢⱼ = −Ωᵢⱼ / √(ΩᵢᵢΩⱼⱼ)                      partial correlation
//	ρᵢ  = 1 − ωᵢᵀD̃ωᵢ / (2 Ωᵢᵢ)                    lag-1 autocorrelation of i's partial residual ωᵢᵀz
//	n*  = n (1 − ρᵢρⱼ) / (1 + ρᵢρⱼ)              at most n, Kish's (Σw)²/Σw² of the weights
//	t   = r √(n* − p) / √(1 − r²)                edge when |t| ≥ t(1 − level/2; n* − p), or n* − p < 1
//
// (ωᵢ the i-th column of Ω; p channels, so p − 2 are conditioned on).
// Kish 1965 (Survey Sampling) for n; the factor is the large-sample
// variance inflation of a correlation between two first-order
// autoregressive series (Bartlett 1935, "Some aspects of the
// time-correlation problem in regard to tests of significance", J. Roy.
// Statist. Soc. 98; in this form eq. 31 of Bretherton, Widmann, Dymnikov,
// Wallace & Bladé 1999, "The effective number of spatial degrees of
// freedom of a time-varying field", J. Climate 12); ρ from differences is
// von Neumann's successive-difference form, 1 − δ²/2s²; ρ = 0 before
// any differences.
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
func (d *Drivers) test(t *Tracker) {
	if !(d.level > 0) {
		return
	}
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
		return // collinear: every slope kept
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
	gen := func(s []float64) blas64.General { return blas64.General{Rows: p, Cols: p, Stride: p, Data: s} }
	blas64.Gemm(blas.NoTrans, blas.NoTrans, 1, gen(d.dmat), gen(d.omega), 0, gen(d.work))
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
		row, keep := d.b[r*c:(r+1)*c], d.keep[r*c:(r+1)*c]
		kept := 0
		for a, j := range d.ctx {
			keep[a] = d.find(i) == d.find(j)
			if keep[a] {
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

// crit returns Student's t quantile 1 − level/2 on ⌊df⌋ degrees of freedom
// (at most len(d.crits) − 1: a larger df uses that quantile, a little
// higher than its own), cached.
func (d *Drivers) crit(df float64) float64 {
	k := min(int(df), len(d.crits)-1)
	if d.crits[k] == 0 {
		d.crits[k] = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(k)}.Quantile(1 - d.level/2)
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
