package modes

import (
	"fmt"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// benchSink keeps benchmark results alive.
var benchSink float64

// benchMatrices returns the sample covariance a1 of n = 2p draws from a
// spiked model with five factors on ten channels each (θ = 10, 8, 6, 5, 4
// over unit noise), and a2 = 0.99·a1 + 0.01·xxᵀ for one more draw x: an
// exponentially weighted covariance one sample later, the "small covariance
// change" between two refreshes.
func benchMatrices(p int) (a1, a2 *mat.SymDense) {
	rng := rand.New(rand.NewPCG(uint64(p), 500))
	theta := []float64{10, 8, 6, 5, 4}
	m := newSpiked(rng, p, 10, theta, 0) // supports and loadings only
	n := 2 * p
	draw := func(x []float64) { m.draw(rng, theta, x) }
	data := mat.NewDense(p, n, nil)
	x := make([]float64, p)
	for s := 0; s < n; s++ {
		draw(x)
		data.SetCol(s, x)
	}
	a1 = mat.NewSymDense(p, nil)
	a1.SymOuterK(1/float64(n), data)
	a2 = mat.NewSymDense(p, nil)
	a2.CopySym(a1)
	draw(x)
	a2.ScaleSym(0.99, a2)
	a2.SymRankOne(a2, 0.01, mat.NewVecDense(p, x))
	return a1, a2
}

var benchSizes = []int{100, 500, 1000}

// timeRefreshes times b.N refreshes of tr, refresh i on the matrix next(i)
// returns, and reports the solver iterations per refresh.
func timeRefreshes(b *testing.B, tr *Set, next func(i int) *mat.SymDense) {
	iters := 0
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := tr.Refresh(next(i)); err != nil {
			b.Fatal(err)
		}
		iters += tr.Iterations()
	}
	b.ReportMetric(float64(iters)/float64(b.N), "iters/op")
	benchSink += tr.Mode(0).Variance
}

// BenchmarkRefresh: r = 5 modes with k = 10 (l0:10, projection deflation).
// warm: refresh after a small covariance change, warm-started, no cold
// retry; cold: every mode from the cold start; eigensym: gonum's full
// eigendecomposition (values and vectors) of the same matrix, the baseline.
func BenchmarkRefresh(b *testing.B) {
	for _, p := range benchSizes {
		a1, a2 := benchMatrices(p)
		cfg := Config{Sparsity: []Sparsity{{Method: L0, K: 10}}, Count: 5, ColdEvery: -1}
		b.Run(fmt.Sprintf("p=%d/warm", p), func(b *testing.B) {
			tr, err := NewSet(p, cfg)
			if err != nil {
				b.Fatal(err)
			}
			if err := tr.Refresh(a1); err != nil {
				b.Fatal(err)
			}
			timeRefreshes(b, tr, func(i int) *mat.SymDense {
				if i%2 == 1 {
					return a1
				}
				return a2
			})
		})
		b.Run(fmt.Sprintf("p=%d/cold", p), func(b *testing.B) {
			tr, err := NewSet(p, cfg)
			if err != nil {
				b.Fatal(err)
			}
			timeRefreshes(b, tr, func(int) *mat.SymDense {
				tr.ColdNext()
				return a1
			})
		})
		b.Run(fmt.Sprintf("p=%d/eigensym", p), func(b *testing.B) {
			var es mat.EigenSym
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				if !es.Factorize(a1, true) {
					b.Fatal("EigenSym failed")
				}
			}
			benchSink += es.Values(nil)[p-1]
		})
	}
}

// BenchmarkSolve: one cold Solve per method on the p = 500 benchmark
// matrix (includes the O(p²) pass for the start column), against one
// EigenSym of the same matrix.
func BenchmarkSolve(b *testing.B) {
	const p = 500
	a, _ := benchMatrices(p)
	x := make([]float64, p)
	for _, s := range []string{"none", "l0:10", "l1:3", "l0pen:0.5", "l1pen:2", "l1sqrt:0.5", "logpen:1,0.1", "exppen:1,0.1"} {
		sp, err := ParseSparsity(s)
		if err != nil {
			b.Fatal(err)
		}
		b.Run(s, func(b *testing.B) {
			ws := NewWorkspace(p)
			iters := 0
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				res, err := Solve(x, a, sp, nil, ws)
				if err != nil {
					b.Fatal(err)
				}
				iters += res.Iterations + res.RefitIterations
			}
			b.ReportMetric(float64(iters)/float64(b.N), "iters/op")
			benchSink += x[0]
		})
	}
}
