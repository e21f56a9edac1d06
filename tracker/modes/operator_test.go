package modes

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// TestOperatorDeflation compares the implicit deflated products and the
// updated column norms with explicitly deflated matrices built by gonum mat
// products from the formulas of Mackey (NIPS 2008; table in testdata/CONGRADU_NOTES.md §5):
//
//	projection: A_t = (I − xxᵀ)A_{t−1}(I − xxᵀ)
//	Schur:      A_t = A_{t−1} − A_{t−1}xxᵀA_{t−1}/(xᵀA_{t−1}x)
//
// with overlapping, non-orthogonal sparse unit vectors x.
func TestOperatorDeflation(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2008))
	const p = 15
	for _, defl := range []Deflation{Projection, Schur} {
		for rep := 0; rep < 5; rep++ {
			a := randomPSD(rng, p, 2*p)
			op := newOperator(p, 3)
			op.defl = defl
			op.setMatrix(a)
			exp := mat.NewSymDense(p, nil)
			exp.CopySym(a)
			cn := make([]float64, p)
			if !op.baseColumnNorms(cn) {
				t.Fatal("finite matrix reported non-finite")
			}
			xs := make([][]float64, 3)
			supps := make([][]int, 3)
			for s := 0; s < 3; s++ {
				// Check the products with A_s before pushing x_s.
				checkProducts(t, rng, op, exp, defl, s)
				checkNorms(t, cn, exp, defl, s)
				x := make([]float64, p)
				supp := rng.Perm(p)[:4]
				sortInts(supp)
				var n float64
				for _, i := range supp {
					x[i] = rng.NormFloat64()
					n += x[i] * x[i]
				}
				for _, i := range supp {
					x[i] /= math.Sqrt(n)
				}
				xs[s], supps[s] = x, supp
				y := make([]float64, p)
				op.apply(y, x, supp)
				f := dotSupp(x, y, supp)
				z := make([]float64, p)
				op.apply(z, y, nil)
				deflateColumnNorms(cn, defl, x, y, z, f)
				if defl == Schur {
					op.pushSchur(x, supp, y, f)
				} else {
					op.pushProjection(x, supp)
				}
				// Explicit deflation of exp.
				xv := mat.NewVecDense(p, x)
				var ax mat.VecDense
				ax.MulVec(exp, xv)
				next := mat.NewSymDense(p, nil)
				if defl == Schur {
					next.CopySym(exp)
					next.SymRankOne(next, -1/mat.Dot(xv, &ax), &ax)
				} else {
					pr := mat.NewDense(p, p, nil)
					for i := 0; i < p; i++ {
						pr.Set(i, i, 1)
					}
					var xxT mat.Dense
					xxT.Outer(1, xv, xv)
					pr.Sub(pr, &xxT)
					var tmp, full mat.Dense
					tmp.Mul(pr, exp)
					full.Mul(&tmp, pr)
					for i := 0; i < p; i++ {
						for j := i; j < p; j++ {
							next.SetSym(i, j, full.At(i, j))
						}
					}
				}
				exp = next
			}
			checkProducts(t, rng, op, exp, defl, 3)
			checkNorms(t, cn, exp, defl, 3)
		}
	}
}

func checkProducts(t *testing.T, rng *rand.Rand, op *operator, exp *mat.SymDense, defl Deflation, s int) {
	t.Helper()
	p := op.p
	for _, nnz := range []int{1, 3, 5, p} { // sparse, sparse, above p/4 (dense path), dense
		v := make([]float64, p)
		var supp []int
		for _, i := range rng.Perm(p)[:nnz] {
			v[i] = rng.NormFloat64()
		}
		for i := range v {
			if v[i] != 0 {
				supp = append(supp, i)
			}
		}
		if nnz == p {
			supp = nil
		}
		got := make([]float64, p)
		op.apply(got, v, supp)
		var want mat.VecDense
		want.MulVec(exp, mat.NewVecDense(p, v))
		for i := range got {
			if !scalar.EqualWithinAbsOrRel(got[i], want.AtVec(i), 1e-12, 1e-10) {
				t.Fatalf("%v after %d deflations, nnz %d: (A v)[%d] = %g, explicit %g", defl, s, nnz, i, got[i], want.AtVec(i))
			}
		}
	}
}

func checkNorms(t *testing.T, cn []float64, exp *mat.SymDense, defl Deflation, s int) {
	t.Helper()
	for i := range cn {
		var n float64
		for j := range cn {
			n += exp.At(i, j) * exp.At(i, j)
		}
		if !scalar.EqualWithinAbsOrRel(cn[i], n, 1e-10, 1e-9) {
			t.Fatalf("%v after %d deflations: column norm² %d = %g, explicit %g", defl, s, i, cn[i], n)
		}
	}
}

// TestColumnCacheEviction: with more distinct columns than cache slots the
// products stay exact (columns are evicted and re-read).
func TestColumnCacheEviction(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	const p = 300 // cache holds max(64, p/4) = 75 columns
	a := randomPSD(rng, p, 10)
	op := newOperator(p, 0)
	op.setMatrix(a)
	got := make([]float64, p)
	for rep := 0; rep < 20; rep++ {
		v := make([]float64, p)
		var supp []int
		for _, i := range rng.Perm(p)[:60] {
			v[i] = rng.NormFloat64()
			supp = append(supp, i)
		}
		sortInts(supp)
		op.apply(got, v, supp)
		var want mat.VecDense
		want.MulVec(a, mat.NewVecDense(p, v))
		for i := range got {
			if !scalar.EqualWithinAbsOrRel(got[i], want.AtVec(i), 1e-12, 1e-10) {
				t.Fatalf("rep %d: (Av)[%d] = %g, want %g", rep, i, got[i], want.AtVec(i))
			}
		}
	}
}
