package tracker

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Drivers removes from a unit's frames the part of its own channels that
// its context channels (drivers from other units: an upstream header
// pressure) explain, under the tracker's current correlation A of the
// standardized channels (o own, c context):
//
//	B   = A_oc (A_cc + εI)⁻¹               (regression of z_o on z_c)
//	z_o ← z_o − B z_c ;   z_c ← 0
//
// applied in channel units with the slopes Bᵢⱼ·σᵢ/σⱼ of the last Fit and
// the current means (the correlation, and so B, changes only at a refresh;
// the means and variances with every frame)
//
// the conditional mean of the own channels given the drivers subtracted,
// the drivers set to their means (the best linear predictor of a Gaussian
// given some coordinates; any multivariate text, e.g. Johnson & Wichern,
// Applied Multivariate Statistical Analysis, §4.6). Scoring the adjusted
// frame against the unit's model judges the unit only on what its drivers
// do not explain: a driver that moves the unit, even outside the range of
// the normal log, raises nothing there, and a driver's own fault is left
// to its own unit. The adjusted own channels vary less than the model
// expects (by the explained share), so the test is conservative.
//
// A slope is kept only where the data tie the channel to a driver (the
// slope test of Fit, see [Drivers.SetLevel]): an own channel that no chain
// of significant partial correlations links to a driver gets slope 0, so
// a chance correlation of a slowly wandering channel with the drivers in
// the learning data is not carried far by a driver's move.
//
// Fit recomputes B from the tracker (after each refresh), Observe feeds
// the slope test every learned frame; Fit, Observe and Adjust are
// allocation-free.
type Drivers struct {
	p        int
	ctx, own []int
	corr     *mat.SymDense
	b        []float64 // o × c, row-major
	slope    []float64 // o × c: B in channel units at the last Fit
	acc, inv []float64 // c × c
	acc0     []float64 // c × c: A_cc + εI, kept for refitRow
	z        []float64 // c
	ready    bool

	// The slope test (driverlag.go).
	level             float64
	lag               *driverLag
	keep              []bool    // o × c: the drivers each own channel keeps
	kept              bool      // keep holds a test's result
	sub               []int     // c
	subAcc, subInv    []float64 // c × c
	rho               []float64 // p: lag-1 autocorrelations
	comp              []int     // p: union-find parents of the channel graph
	crits             []float64 // t quantiles by degrees of freedom, 0: not yet
	omega, work, dmat []float64 // p × p
}

// MaxDrivers bounds the context channels of one unit.
const MaxDrivers = 32

// NewDrivers returns the drivers of a tracker of p channels whose context
// channels are marked in ctx (len p). It fails without a context channel,
// without an own channel, or with more than MaxDrivers.
func NewDrivers(p int, ctx []bool) (*Drivers, error) {
	if len(ctx) != p {
		return nil, fmt.Errorf("%w: %d context flags for %d channels", ErrWidth, len(ctx), p)
	}
	d := &Drivers{p: p}
	for i, c := range ctx {
		if c {
			d.ctx = append(d.ctx, i)
		} else {
			d.own = append(d.own, i)
		}
	}
	if len(d.ctx) == 0 || len(d.own) == 0 || len(d.ctx) > MaxDrivers {
		return nil, fmt.Errorf("%w: %d context and %d own channels (1 to %d context channels and at least one own)",
			ErrConfig, len(d.ctx), len(d.own), MaxDrivers)
	}
	c := len(d.ctx)
	d.corr = mat.NewSymDense(p, nil)
	d.b = make([]float64, len(d.own)*c)
	d.slope = make([]float64, len(d.own)*c)
	d.acc = make([]float64, c*c)
	d.inv = make([]float64, c*c)
	d.acc0 = make([]float64, c*c)
	d.z = make([]float64, c)
	d.level = DefaultDriverLevel
	d.lag = newDriverLag(p)
	d.rho, d.comp, d.crits = make([]float64, p), make([]int, p), make([]float64, 1024)
	if p <= MaxDriverTestChannels {
		d.omega, d.work, d.dmat = make([]float64, p*p), make([]float64, p*p), make([]float64, p*p)
	}
	d.keep = make([]bool, len(d.own)*c)
	d.sub = make([]int, 0, c)
	d.subAcc, d.subInv = make([]float64, c*c), make([]float64, c*c)
	return d, nil
}

// Ready reports whether B has been fitted.
func (d *Drivers) Ready() bool { return d.ready }

// Slopes returns the regression in channel units of the last Fit (own ×
// context channels, row-major), nil before the first; a checkpoint saves
// it so that a restart goes on with the same regression until the next
// refresh.
func (d *Drivers) Slopes() []float64 {
	if !d.ready {
		return nil
	}
	return append([]float64(nil), d.slope...)
}

// SetSlopes restores the regression saved by Slopes.
func (d *Drivers) SetSlopes(s []float64) error {
	if len(s) != len(d.slope) {
		return fmt.Errorf("%w: %d driver slopes, want %d", ErrWidth, len(s), len(d.slope))
	}
	copy(d.slope, s)
	d.ready = true
	return nil
}

// Fit recomputes B from t's current correlation (with the tracker's
// ridge ε), then applies the slope test (unless its level is 0): the
// slopes of an own channel on drivers outside its component of the
// partial-correlation graph are 0 and the rest refitted (see test in
// driverlag.go). It allocates nothing.
func (d *Drivers) Fit(t *Tracker) error {
	if t.P() != d.p {
		return fmt.Errorf("%w: drivers of %d channels, tracker of %d", ErrWidth, d.p, t.P())
	}
	t.ew.CorrTo(d.corr, nil)
	c := len(d.ctx)
	eps := t.cfg.Ridge
	for a, i := range d.ctx {
		for b, j := range d.ctx {
			d.acc[a*c+b] = d.corr.At(i, j)
		}
		d.acc[a*c+a] += eps
		if d.acc[a*c+a] <= eps {
			d.acc[a*c+a] = 1 // a context channel without variance explains nothing
		}
	}
	copy(d.acc0, d.acc)
	if !invert(d.inv, d.acc, c) {
		d.ready = false
		return fmt.Errorf("%w: context channels are collinear", ErrModel)
	}
	for r, i := range d.own {
		row := d.b[r*c : (r+1)*c]
		for b := range row {
			s := 0.0
			for a, j := range d.ctx {
				s += d.corr.At(i, j) * d.inv[a*c+b]
			}
			row[b] = s
		}
	}
	d.test(t)
	// Slopes in channel units, fixed until the next Fit: the means and
	// variances move with every frame, the correlation only at a refresh.
	e := t.ew
	for r, i := range d.own {
		for b, j := range d.ctx {
			d.slope[r*c+b] = 0
			if vi, vj := e.Var(i), e.Var(j); vi > 0 && vj > 0 {
				d.slope[r*c+b] = d.b[r*c+b] * math.Sqrt(vi/vj)
			}
		}
	}
	d.ready = true
	return nil
}

// Adjust writes into dst (len p) the frame x with the drivers' part
// removed (see [Drivers]), in channel units; missing (nil or len p) marks
// channels without a value, which stay as they are in dst (a missing
// driver explains nothing). Before Fit it copies x.
func (d *Drivers) Adjust(dst, x []float64, missing []bool, t *Tracker) {
	copy(dst, x)
	if !d.ready {
		return
	}
	e := t.ew
	for a, i := range d.ctx {
		d.z[a] = 0 // here: the driver's deviation from its current mean, in its unit
		if (missing == nil || !missing[i]) && !math.IsNaN(x[i]) {
			d.z[a] = x[i] - e.Mean(i)
			dst[i] = e.Mean(i)
		}
	}
	c := len(d.ctx)
	for r, i := range d.own {
		if missing != nil && missing[i] {
			continue
		}
		s := 0.0
		for a, b := range d.slope[r*c : (r+1)*c] {
			s += b * d.z[a]
		}
		dst[i] = x[i] - s
	}
}

// invert writes the inverse of the n × n matrix a (row-major) into dst by
// Gauss–Jordan elimination with partial pivoting, using dst and a as work
// (a is overwritten). It reports false for a singular matrix.
func invert(dst, a []float64, n int) bool {
	for i := range dst[:n*n] {
		dst[i] = 0
	}
	for i := 0; i < n; i++ {
		dst[i*n+i] = 1
	}
	for col := 0; col < n; col++ {
		piv, best := col, math.Abs(a[col*n+col])
		for r := col + 1; r < n; r++ {
			if v := math.Abs(a[r*n+col]); v > best {
				piv, best = r, v
			}
		}
		if !(best > 1e-12) {
			return false
		}
		if piv != col {
			for k := 0; k < n; k++ {
				a[col*n+k], a[piv*n+k] = a[piv*n+k], a[col*n+k]
				dst[col*n+k], dst[piv*n+k] = dst[piv*n+k], dst[col*n+k]
			}
		}
		f := 1 / a[col*n+col]
		for k := 0; k < n; k++ {
			a[col*n+k] *= f
			dst[col*n+k] *= f
		}
		for r := 0; r < n; r++ {
			if r == col {
				continue
			}
			g := a[r*n+col]
			if g == 0 {
				continue
			}
			for k := 0; k < n; k++ {
				a[r*n+k] -= g * a[col*n+k]
				dst[r*n+k] -= g * dst[col*n+k]
			}
		}
	}
	return true
}
