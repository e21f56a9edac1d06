package modes

import (
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// Deflation selects how the matrix is deflated after a mode is extracted
// (Mackey, "Deflation methods for sparse PCA", NIPS 21, 2008). Hotelling
// deflation A − (xᵀAx)xxᵀ is not offered: it loses positive semidefiniteness
// when x is not an eigenvector, which sparse modes never are.
type Deflation int

const (
	// Projection deflation A ← (I − xxᵀ)A(I − xxᵀ) (the default): keeps A
	// positive semidefinite and removes the direction x.
	Projection Deflation = iota
	// Schur-complement deflation A ← A − AxxᵀA/(xᵀAx): the conditional
	// covariance given the mode's score; also A_t x_s = 0 for earlier s.
	Schur
)

// String returns "projection" or "schur".
func (d Deflation) String() string {
	switch d {
	case Projection:
		return "projection"
	case Schur:
		return "schur"
	}
	return "Deflation(?)"
}

// operator applies the deflated matrix A_t implicitly. A_0 is the caller's
// symmetric matrix in gonum's upper-triangular storage; deflations are kept
// as vectors:
//
//	projection: A_t v = P_t⋯P_1 A_0 P_1⋯P_t v,  P_s = I − x_s x_sᵀ
//	Schur:      A_t v = A_0 v − Σ_s u_s (u_sᵀv)/d_s,  u_s = A_{s−1}x_s, d_s = x_sᵀu_s
//
// A product with a vector of n nonzeros is a sum of n columns of A_0 (O(pn));
// the columns are mirrored out of the triangular storage once per matrix into
// a bounded cache. Nothing here allocates after newOperator.
type operator struct {
	p    int
	a    blas64.Symmetric
	defl Deflation

	t     int         // number of deflations applied
	xs    [][]float64 // deflation vectors (unit), length p each; slices owned by the caller
	xsupp [][]int     // their supports
	us    [][]float64 // Schur: u_s = A_{s−1}x_s (owned here)
	ds    []float64   // Schur: d_s = x_sᵀA_{s−1}x_s

	// column cache: slot s holds column colOf[s] of A_0.
	cache  []float64
	cap    int
	slotOf []int32
	colOf  []int32
	next   int

	// scratch for sparse products
	w     []float64
	wsupp []int
	wmark []bool
}

func newOperator(p, maxT int) *operator {
	c := p / 4
	if c < 64 {
		c = 64
	}
	if c > p {
		c = p
	}
	o := &operator{
		p:      p,
		xs:     make([][]float64, maxT),
		xsupp:  make([][]int, maxT),
		us:     make([][]float64, maxT),
		ds:     make([]float64, maxT),
		cache:  make([]float64, c*p),
		cap:    c,
		slotOf: make([]int32, p),
		colOf:  make([]int32, c),
		w:      make([]float64, p),
		wsupp:  make([]int, 0, p),
		wmark:  make([]bool, p),
	}
	for i := range o.us {
		o.us[i] = make([]float64, p)
	}
	for i := range o.slotOf {
		o.slotOf[i] = -1
	}
	for i := range o.colOf {
		o.colOf[i] = -1
	}
	return o
}

// setMatrix points the operator at a new A_0 and drops all deflations and
// cached columns. It panics if a is not p × p (programmer error).
func (o *operator) setMatrix(a *mat.SymDense) {
	if a.SymmetricDim() != o.p {
		panic("modes: matrix dimension mismatch")
	}
	o.a = a.RawSymmetric()
	if o.a.Uplo != blas.Upper {
		panic("modes: matrix must use upper-triangular storage")
	}
	o.t = 0
	o.clearCache()
}

func (o *operator) clearCache() {
	for s, c := range o.colOf {
		if c >= 0 {
			o.slotOf[c] = -1
			o.colOf[s] = -1
		}
	}
	o.next = 0
}

// diag returns A_0[i,i].
func (o *operator) diag(i int) float64 { return o.a.Data[i*o.a.Stride+i] }

// column returns column i of A_0 (full, length p) from the cache.
func (o *operator) column(i int) []float64 {
	p := o.p
	if s := o.slotOf[i]; s >= 0 {
		return o.cache[int(s)*p : int(s)*p+p]
	}
	s := o.next
	o.next++
	if o.next == o.cap {
		o.next = 0
	}
	if old := o.colOf[s]; old >= 0 {
		o.slotOf[old] = -1
	}
	o.colOf[s] = int32(i)
	o.slotOf[i] = int32(s)
	col := o.cache[s*p : s*p+p]
	d, st := o.a.Data, o.a.Stride
	for j := 0; j < i; j++ {
		col[j] = d[j*st+i]
	}
	copy(col[i:], d[i*st+i:i*st+p])
	return col
}

// pushProjection records projection deflation by the unit vector x with
// support supp (slices are kept, not copied).
func (o *operator) pushProjection(x []float64, supp []int) {
	o.xs[o.t], o.xsupp[o.t] = x, supp
	o.t++
}

// pushSchur records Schur deflation by x; y must be A_t x (the current
// deflated product) and f = xᵀy > 0.
func (o *operator) pushSchur(x []float64, supp []int, y []float64, f float64) {
	o.xs[o.t], o.xsupp[o.t] = x, supp
	copy(o.us[o.t], y)
	o.ds[o.t] = f
	o.t++
}

// apply sets dst = A_t v. vsupp lists the nonzeros of v; nil means v is
// dense. dst must not alias v.
func (o *operator) apply(dst, v []float64, vsupp []int) {
	p := o.p
	proj := o.defl == Projection
	if vsupp == nil || 4*len(vsupp) > p {
		src := v
		if proj && o.t > 0 {
			copy(o.w, v)
			for s := o.t - 1; s >= 0; s-- {
				o.project(o.w, s)
			}
			src = o.w
		}
		blas64.Symv(1, o.a, blas64.Vector{N: p, Inc: 1, Data: src}, 0, blas64.Vector{N: p, Inc: 1, Data: dst})
		if proj && o.t > 0 {
			for i := range o.w {
				o.w[i] = 0
			}
		}
	} else {
		w := o.w
		o.wsupp = o.wsupp[:0]
		for _, i := range vsupp {
			w[i] = v[i]
		}
		o.markSupport(vsupp)
		if proj {
			for s := o.t - 1; s >= 0; s-- {
				if o.project(w, s) {
					o.markSupport(o.xsupp[s])
				}
			}
		}
		if 4*len(o.wsupp) > p {
			blas64.Symv(1, o.a, blas64.Vector{N: p, Inc: 1, Data: w}, 0, blas64.Vector{N: p, Inc: 1, Data: dst})
		} else {
			for i := range dst {
				dst[i] = 0
			}
			for _, i := range o.wsupp {
				if wi := w[i]; wi != 0 {
					axpy(dst, wi, o.column(i))
				}
			}
		}
		for _, i := range o.wsupp {
			w[i] = 0
			o.wmark[i] = false
		}
		o.wsupp = o.wsupp[:0]
	}
	if proj {
		for s := 0; s < o.t; s++ {
			o.project(dst, s)
		}
		return
	}
	for s := 0; s < o.t; s++ {
		u := o.us[s]
		var dot float64
		if vsupp == nil {
			for i, vi := range v {
				dot += u[i] * vi
			}
		} else {
			for _, i := range vsupp {
				dot += u[i] * v[i]
			}
		}
		if dot != 0 {
			axpy(dst, -dot/o.ds[s], u)
		}
	}
}

// project sets z ← (I − x_s x_sᵀ) z for a dense z; it reports whether z
// changed (x_sᵀz ≠ 0).
func (o *operator) project(z []float64, s int) bool {
	x := o.xs[s]
	var dot float64
	for _, i := range o.xsupp[s] {
		dot += x[i] * z[i]
	}
	if dot == 0 {
		return false
	}
	for _, i := range o.xsupp[s] {
		z[i] -= dot * x[i]
	}
	return true
}

// markSupport adds the indices of supp not yet marked to the support of w.
func (o *operator) markSupport(supp []int) {
	for _, i := range supp {
		if !o.wmark[i] {
			o.wmark[i] = true
			o.wsupp = append(o.wsupp, i)
		}
	}
}

// baseColumnNorms sets dst[i] = ‖A_0 e_i‖² reading the upper triangle once,
// and reports whether every entry of A_0 is finite.
func (o *operator) baseColumnNorms(dst []float64) bool {
	p, d, st := o.p, o.a.Data, o.a.Stride
	for i := range dst {
		dst[i] = 0
	}
	finite := true
	for i := 0; i < p; i++ {
		row := d[i*st+i : i*st+p]
		var s float64
		for j, v := range row {
			if j == 0 {
				s += v * v
				continue
			}
			s += v * v
			dst[i+j] += v * v
		}
		dst[i] += s
		if math.IsNaN(s) || math.IsInf(s, 0) {
			finite = false
		}
	}
	return finite
}

// deflateColumnNorms updates cn[i] = ‖A_t e_i‖² to ‖A_{t+1} e_i‖² for the
// deflation by unit x with y = A_t x, f = xᵀy and z = A_t y. With a_i = A_t e_i
// (so a_iᵀx = y_i, a_iᵀy = z_i):
//
//	projection: A_{t+1}e_i = a_i − x_i y − β_i x, β_i = y_i − x_i f
//	            ‖·‖² = ‖a_i‖² + x_i²‖y‖² + β_i² − 2x_i z_i − 2β_i y_i + 2x_iβ_i f
//	Schur:      A_{t+1}e_i = a_i − y y_i/f
//	            ‖·‖² = ‖a_i‖² − 2y_i z_i/f + y_i²‖y‖²/f²
//
// Results are clamped at 0 against rounding.
func deflateColumnNorms(cn []float64, defl Deflation, x, y, z []float64, f float64) {
	var yy float64
	for _, v := range y {
		yy += v * v
	}
	for i := range cn {
		var n float64
		if defl == Schur {
			n = cn[i] - 2*y[i]*z[i]/f + y[i]*y[i]*yy/(f*f)
		} else {
			b := y[i] - x[i]*f
			n = cn[i] + x[i]*x[i]*yy + b*b - 2*x[i]*z[i] - 2*b*y[i] + 2*x[i]*b*f
		}
		if n < 0 || math.IsNaN(n) {
			n = 0
		}
		cn[i] = n
	}
}

// axpy sets dst += alpha·x (gonum's assembly kernel).
func axpy(dst []float64, alpha float64, x []float64) { floats.AddScaled(dst, alpha, x) }
