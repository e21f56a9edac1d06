package tracker

import (
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// blockCorrelation is a p-channel correlation matrix of p/k blocks of k
// channels, correlation rho inside a block and 0 across blocks.
func blockCorrelation(p, k int, rho float64) *mat.SymDense {
	a := mat.NewSymDense(p, nil)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			switch {
			case i == j:
				a.SetSym(i, j, 1)
			case i/k == j/k:
				a.SetSym(i, j, rho)
			}
		}
	}
	return a
}

// TestResidualAlwaysExists: a 9-channel unit of three 3-channel groups
// with 3-sparse modes and the automatic count. Asking for the whole
// variance (share 1) used to give nine modes that span the unit, an empty
// residual and SPE limit +Inf; the residual minimum now stops at eight.
// With Kaiser's rule (MinAdjusted 1) the count
// is three, one per group (eigenvalues 1 + 2·0.8 = 2.6 per group, the
// within-group ones 0.2). In both cases SPE has a finite limit and sees a
// sensor that leaves its group (+4σ on channel 4, 4 ≥ 3·2 standard
// deviations of the within-group residual: common practice).
func TestResidualAlwaysExists(t *testing.T) {
	const p = 9
	for _, c := range []struct {
		name    string
		mc      modes.Config
		r, dims int
	}{
		{"share 1", modes.Config{Share: 1, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 3}}}, 8, 1},
		{"Kaiser, l0:3", modes.Config{MinAdjusted: 1, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 3}}}, 3, 6},
	} {
		t.Run(c.name, func(t *testing.T) {
			tr, err := New(p, Config{Period: time.Second, HalfLife: 0, WarmUp: 500, RefreshEvery: 100, Modes: c.mc})
			if err != nil {
				t.Fatal(err)
			}
			src := newGaussSource(5, blockCorrelation(p, 3, 0.8))
			var sc Score
			x := make([]float64, p)
			for k := 0; k < 2000; k++ {
				if err := tr.Step(&sc, src.frame(x), nil); err != nil {
					t.Fatal(err)
				}
			}
			if sc.Modes != c.r || tr.ResidualDims() != c.dims {
				t.Errorf("%d modes, %d residual dimensions; want %d and %d", sc.Modes, tr.ResidualDims(), c.r, c.dims)
			}
			if math.IsInf(sc.SPELimit, 0) || !(sc.SPELimit > 0) {
				t.Fatalf("SPE limit %v, want finite and positive", sc.SPELimit)
			}
			src.frame(x)
			x[4] += 4 * src.sd[4]
			if err := tr.Evaluate(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			if !(sc.SPE > sc.SPELimit) {
				t.Errorf("SPE %.2f under its limit %.2f after a +4σ step on one channel", sc.SPE, sc.SPELimit)
			}
		})
	}
}
