package tracker

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"
)

// syrkUpper equals gonum's reference blas64.Syrk (NoTrans, upper) within
// 1e-13 relative (same products, different summation order and fused
// multiply-adds in the AVX2 kernel) on sizes that exercise every edge of the
// 4 × 2 blocking (k a multiple of 4 takes the assembly kernel where the CPU
// has AVX2/FMA, other k the Go loops), and leaves the strict lower triangle
// and the columns beyond n untouched.
func TestSyrkUpperMatchesGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	for _, n := range []int{1, 2, 3, 4, 5, 6, 7, 8, 9, 13, 37, 64} {
		for _, k := range []int{0, 1, 3, 4, 5, 8, 12, 64} {
			for _, ab := range [][2]float64{{1, 0}, {1, 0.97}, {1, 1}, {-1, 1}, {0.5, 0.3}} {
				alpha, beta := ab[0], ab[1]
				lda, ldc := k+3, n+2
				a := make([]float64, n*lda)
				for i := range a {
					a[i] = rng.NormFloat64()
				}
				c := make([]float64, n*ldc)
				for i := range c {
					c[i] = rng.NormFloat64()
				}
				ref := append([]float64(nil), c...)
				syrkUpper(n, k, a, lda, alpha, beta, c, ldc)
				if k > 0 {
					blas64.Syrk(blas.NoTrans, alpha, blas64.General{Rows: n, Cols: k, Stride: lda, Data: a}, beta,
						blas64.Symmetric{N: n, Stride: ldc, Data: ref, Uplo: blas.Upper})
				} else {
					for i := 0; i < n; i++ {
						for j := i; j < n; j++ {
							ref[i*ldc+j] *= beta
						}
					}
				}
				for i := 0; i < n; i++ {
					for j := 0; j < ldc; j++ {
						got, want := c[i*ldc+j], ref[i*ldc+j]
						if j < i || j >= n {
							if got != want {
								t.Fatalf("n=%d k=%d: entry (%d,%d) outside the upper triangle changed", n, k, i, j)
							}
							continue
						}
						if math.Abs(got-want) > 1e-13*(1+math.Abs(want)) {
							t.Fatalf("n=%d k=%d α=%v β=%v: c[%d,%d] = %v, gonum %v", n, k, alpha, beta, i, j, got, want)
						}
					}
				}
			}
		}
	}
}

// BenchmarkSyrkKernel compares the rank-64 update of a 500 × 500 upper
// triangle by syrkUpper with gonum's blas64.Syrk (the baseline in the same run).
func BenchmarkSyrkKernel(b *testing.B) {
	const n, k = 500, 64
	rng := rand.New(rand.NewPCG(1, 2))
	a := make([]float64, n*k)
	for i := range a {
		a[i] = rng.NormFloat64()
	}
	c := make([]float64, n*n)
	for _, name := range []string{"gonum", "own"} {
		b.Run(fmt.Sprintf("%s/n=%d/k=%d", name, n, k), func(b *testing.B) {
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				if name == "own" {
					syrkUpper(n, k, a, k, 1, 0.5, c, n)
				} else {
					blas64.Syrk(blas.NoTrans, 1, blas64.General{Rows: n, Cols: k, Stride: k, Data: a}, 0.5,
						blas64.Symmetric{N: n, Stride: n, Data: c, Uplo: blas.Upper})
				}
			}
		})
	}
}

// cholUpper (blocked, with the rank-update kernel) equals gonum's
// mat.Cholesky factor U within 1e-10 relative on SPD matrices of sizes
// below, at and across the panel width, and refuses an indefinite matrix.
func TestCholUpperMatchesGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(23, 24))
	for _, n := range []int{1, 2, 5, 63, 64, 65, 130, 200} {
		g := mat.NewDense(n, n+5, nil)
		for i := 0; i < n; i++ {
			for j := 0; j < n+5; j++ {
				g.Set(i, j, rng.NormFloat64())
			}
		}
		s := mat.NewSymDense(n, nil)
		s.SymOuterK(1, g)
		lda := n + 3
		a := make([]float64, n*lda)
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				a[i*lda+j] = s.At(i, j)
			}
		}
		if !cholUpper(a, n, lda, make([]float64, n*cholBlock)) {
			t.Fatalf("n=%d: SPD matrix refused", n)
		}
		var ch mat.Cholesky
		if !ch.Factorize(s) {
			t.Fatal("gonum refused")
		}
		var u mat.TriDense
		ch.UTo(&u)
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				approx(t, fmt.Sprintf("n=%d U[%d,%d]", n, i, j), a[i*lda+j], u.At(i, j), 1e-10*math.Sqrt(s.At(j, j)), 1e-10)
			}
		}
	}
	// Indefinite: diag(1, −1) refused.
	if cholUpper([]float64{1, 0.5, 0, -1}, 2, 2, make([]float64, 2*cholBlock)) {
		t.Error("indefinite matrix factored")
	}
}
