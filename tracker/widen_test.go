package tracker

import (
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// mahalanobis returns δᵀC⁻¹δ by gonum's Cholesky solve.
func mahalanobis(t *testing.T, c *mat.SymDense, d []float64) float64 {
	t.Helper()
	var ch mat.Cholesky
	if !ch.Factorize(c) {
		t.Fatal("covariance not positive definite")
	}
	var y mat.VecDense
	if err := ch.SolveVecTo(&y, mat.NewVecDense(len(d), d)); err != nil {
		t.Fatal(err)
	}
	return mat.Dot(mat.NewVecDense(len(d), d), &y)
}

// learnedStream returns a tracker of p channels that has learned 3000
// frames of its seeded Gaussian source, and the source.
func learnedStream(t *testing.T, p int) (*Tracker, *gaussSource) {
	t.Helper()
	tr, src := newStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, Batch: 16, Modes: modes.Config{Count: 2}, FlatFrames: -1})
	var sc Score
	x := make([]float64, p)
	for k := 0; k < 3000; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
	}
	return tr, src
}

// TestWidenShermanMorrison: Widen adds w·δδᵀ to the covariance and keeps
// the means, so the state's Mahalanobis distance m becomes m/(1 + w·m)
// (Sherman & Morrison 1950, the rank-one update of an inverse), checked
// against a direct Cholesky solve (gonum); channels outside which, and
// the variances of the covariance's diagonal, follow.
func TestWidenShermanMorrison(t *testing.T) {
	const p = 10
	tr, src := learnedStream(t, p)
	x := make([]float64, p)
	src.frame(x)
	which := make([]bool, p)
	d := make([]float64, p)
	for _, i := range []int{1, 4, 7} {
		which[i] = true
		x[i] = tr.ew.Mean(i) + 5*math.Sqrt(tr.ew.Var(i))
		d[i] = x[i] - tr.ew.Mean(i)
	}
	mean0 := tr.ew.MeanTo(make([]float64, p))
	c0 := mat.NewSymDense(p, nil)
	tr.ew.CovTo(c0)
	m := mahalanobis(t, c0, d)
	const w = 0.2
	tr.Widen(x, which, w)
	c1 := mat.NewSymDense(p, nil)
	tr.ew.CovTo(c1)
	m1 := mahalanobis(t, c1, d)
	want := m / (1 + w*m)
	t.Logf("m %.2f → %.4f (Sherman–Morrison %.4f, bound 1/w = %g)", m, m1, want, 1/w)
	if math.Abs(m1-want) > 1e-9*want {
		t.Errorf("widened distance %v, want %v", m1, want)
	}
	for i := 0; i < p; i++ {
		if tr.ew.Mean(i) != mean0[i] {
			t.Errorf("mean %d moved", i)
		}
		if math.Abs(tr.ew.Var(i)-c1.At(i, i)) > 1e-12*c1.At(i, i) {
			t.Errorf("variance %d %v, covariance diagonal %v", i, tr.ew.Var(i), c1.At(i, i))
		}
		for j := 0; j < p; j++ {
			if !which[i] || !which[j] {
				if c1.At(i, j) != c0.At(i, j) {
					t.Errorf("C[%d,%d] outside the accepted channels changed", i, j)
				}
			}
		}
	}
	// A frozen tracker learns nothing, not even a widening.
	tr.Freeze()
	tr.Widen(x, which, w)
	c2 := mat.NewSymDense(p, nil)
	tr.ew.CovTo(c2)
	if !mat.Equal(c1, c2) {
		t.Error("a frozen tracker was widened")
	}
}

// TestWidenScores: a unit that moved 6σ along one channel's direction
// scores far over its limits; after a window of 30 frames at that state
// is added with total weight 0.2 and the model refreshed, the moved state
// and the old operating point both score within the limits.
func TestWidenScores(t *testing.T) {
	const p = 10
	tr, src := learnedStream(t, p)
	var sc Score
	x := make([]float64, p)
	which := make([]bool, p)
	which[3] = true
	shift := 6 * math.Sqrt(tr.ew.Var(3))
	over := func() float64 {
		return math.Max(sc.T2/sc.T2Limit, sc.SPE/sc.SPELimit)
	}
	moved := func() []float64 { src.frame(x); x[3] += shift; return x }
	if err := tr.Evaluate(&sc, moved(), nil); err != nil {
		t.Fatal(err)
	}
	before := over()
	for k := 1; k <= 30; k++ {
		tr.Widen(moved(), which, 0.2/30)
	}
	if err := tr.Refresh(); err != nil {
		t.Fatal(err)
	}
	meanMoved, meanOld := 0.0, 0.0
	for k := 0; k < 200; k++ {
		if err := tr.Evaluate(&sc, moved(), nil); err != nil {
			t.Fatal(err)
		}
		meanMoved += over() / 200
		if err := tr.Evaluate(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		meanOld += over() / 200
	}
	t.Logf("largest statistic/limit of the moved state: %.2f before, mean %.2f after; old state mean %.2f", before, meanMoved, meanOld)
	if before < 2 {
		t.Fatalf("the 6σ move scored only %.2f of the limit before the widening", before)
	}
	if meanMoved >= 1 || meanOld >= 1 {
		t.Errorf("after the widening the moved state scores %.2f, the old %.2f of the limits (mean), want both below 1", meanMoved, meanOld)
	}
}
