package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// TestDrivers: the regression of the own channels on the context channels
// matches gonum's least-squares solve of A_cc B' = A_co on the same
// correlation matrix (reference: gonum mat.Dense.Solve), and a frame whose
// own channels sit at their conditional mean given a driver far outside
// its normal range is adjusted to the channel means.
func TestDrivers(t *testing.T) {
	const p = 4 // channels 0, 1 own; 2, 3 context
	tr, err := New(p, Config{Period: time.Second, WarmUp: 200})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	var sc Score
	x := make([]float64, p)
	for k := 0; k < 3000; k++ {
		c1, c2 := rng.NormFloat64(), rng.NormFloat64()
		x[0] = 10 + 2*c1 - c2 + 0.3*rng.NormFloat64()
		x[1] = -5 + 0.5*c2 + 0.3*rng.NormFloat64()
		x[2], x[3] = 3+c1, 7+2*c2
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
	}
	d, err := NewDrivers(p, []bool{false, false, true, true})
	if err != nil {
		t.Fatal(err)
	}
	if err := d.Fit(tr); err != nil {
		t.Fatal(err)
	}
	// Reference: B' = A_cc⁻¹ A_co by gonum.
	a := mat.NewSymDense(p, nil)
	tr.ew.CorrTo(a, nil)
	acc := mat.NewDense(2, 2, []float64{a.At(2, 2) + tr.cfg.Ridge, a.At(2, 3), a.At(3, 2), a.At(3, 3) + tr.cfg.Ridge})
	aco := mat.NewDense(2, 2, []float64{a.At(2, 0), a.At(2, 1), a.At(3, 0), a.At(3, 1)})
	var bt mat.Dense
	if err := bt.Solve(acc, aco); err != nil {
		t.Fatal(err)
	}
	for r := 0; r < 2; r++ {
		for c := 0; c < 2; c++ {
			if got, want := d.b[r*2+c], bt.At(c, r); !scalar.EqualWithinAbsOrRel(got, want, 1e-9, 1e-9) {
				t.Errorf("B[%d][%d] = %v, gonum %v", r, c, got, want)
			}
		}
	}
	// Drivers 4 σ and −5 σ out, own channels where they lead them.
	c1, c2 := 4.0, -5.0
	x = []float64{10 + 2*c1 - c2, -5 + 0.5*c2, 3 + c1, 7 + 2*c2}
	adj := make([]float64, p)
	d.Adjust(adj, x, nil, tr)
	for i := 0; i < p; i++ {
		sd := math.Sqrt(tr.ew.Var(i))
		if dz := (adj[i] - tr.ew.Mean(i)) / sd; math.Abs(dz) > 0.1 {
			t.Errorf("channel %d adjusted to %.3f σ from its mean; want the drivers' part removed", i, dz)
		}
	}
	if n := testing.AllocsPerRun(100, func() { d.Adjust(adj, x, nil, tr) }); n != 0 {
		t.Errorf("Adjust allocates %v", n)
	}
	if n := testing.AllocsPerRun(20, func() { _ = d.Fit(tr) }); n != 0 {
		t.Errorf("Fit allocates %v", n)
	}
}
