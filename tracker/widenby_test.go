package tracker

import (
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// TestWidenBySplit: Widen is DeviationTo followed by WidenBy when every
// channel is in the model: the same covariance to the last bit on two
// trackers that learned the same frames. DeviationTo is x − μ on the
// channels asked for and 0 elsewhere, a non-finite reading included
// (hand derivation from its contract).
func TestWidenBySplit(t *testing.T) {
	const p = 8
	a, src := learnedStream(t, p)
	b, _ := learnedStream(t, p)
	x := src.frame(make([]float64, p))
	x[6] = math.NaN()
	which := []bool{true, false, true, true, false, false, true, true}
	d := a.DeviationTo(make([]float64, p), x, which)
	for i := range d {
		want := 0.0
		if which[i] && i != 6 {
			want = x[i] - a.ew.Mean(i)
		}
		if d[i] != want {
			t.Errorf("deviation %d = %v, want %v", i, d[i], want)
		}
	}
	a.Widen(x, which, 0.05)
	b.WidenBy(d, 0.05)
	ca, cb := mat.NewSymDense(p, nil), mat.NewSymDense(p, nil)
	a.ew.CovTo(ca)
	b.ew.CovTo(cb)
	if !mat.Equal(ca, cb) {
		t.Errorf("Widen and DeviationTo+WidenBy differ:\n%v\n%v", mat.Formatted(ca), mat.Formatted(cb))
	}
}

// TestWidenByOutOfModel: a deviation taken under another model widens
// this one only on the channels its model holds; a channel out of it
// (here held constant, so stuck: a machine at rest in this operating
// state) keeps its variance and covariances. On the channels in the model
// the widened Mahalanobis distance of the deviation is m/(1 + w·m)
// (Sherman & Morrison 1950), checked against a direct Cholesky solve
// (gonum). Before a model exists, and frozen, it does nothing; it
// allocates nothing.
func TestWidenByOutOfModel(t *testing.T) {
	const p, rest = 6, 2
	tr, src := newStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, Batch: 16, Modes: modes.Config{Count: 2}, FlatFrames: 50})
	var sc Score
	x := make([]float64, p)
	d := make([]float64, p)
	for i := range d {
		d[i] = 3 * float64(i%3+1) // a deviation on every channel, the one at rest included
	}
	tr.WidenBy(d, 0.2) // no model yet: nothing
	for k := 0; k < 3000; k++ {
		src.frame(x)
		x[rest] = 4
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
	}
	if tr.mdl.include[rest] {
		t.Fatal("the constant channel is still in the model")
	}
	in := []int{}
	for i := 0; i < p; i++ {
		if i != rest {
			in = append(in, i)
		}
	}
	sub := func() (*mat.SymDense, []float64) {
		c := mat.NewSymDense(p, nil)
		tr.ew.CovTo(c)
		s := mat.NewSymDense(len(in), nil)
		v := make([]float64, len(in))
		for a, i := range in {
			v[a] = d[i]
			for b, j := range in {
				s.SetSym(a, b, c.At(i, j))
			}
		}
		return s, v
	}
	c0 := mat.NewSymDense(p, nil)
	tr.ew.CovTo(c0)
	s0, v := sub()
	m := mahalanobis(t, s0, v)
	const w = 0.2
	tr.WidenBy(d, w)
	c1 := mat.NewSymDense(p, nil)
	tr.ew.CovTo(c1)
	s1, _ := sub()
	m1 := mahalanobis(t, s1, v)
	want := m / (1 + w*m)
	t.Logf("m %.2f → %.4f (Sherman–Morrison %.4f)", m, m1, want)
	if math.Abs(m1-want) > 1e-9*want {
		t.Errorf("widened distance %v, want %v", m1, want)
	}
	for j := 0; j < p; j++ {
		if c1.At(rest, j) != c0.At(rest, j) {
			t.Errorf("C[%d,%d] of the channel out of the model changed: %v → %v", rest, j, c0.At(rest, j), c1.At(rest, j))
		}
	}
	if tr.ew.Var(rest) != c0.At(rest, rest) {
		t.Errorf("variance of the channel out of the model changed")
	}
	tr.Freeze()
	tr.WidenBy(d, w)
	c2 := mat.NewSymDense(p, nil)
	tr.ew.CovTo(c2)
	if !mat.Equal(c1, c2) {
		t.Error("a frozen tracker was widened")
	}
	tr.Thaw()
	if n := testing.AllocsPerRun(50, func() { tr.DeviationTo(d, x, tr.mdl.include); tr.WidenBy(d, 1e-9) }); n != 0 {
		t.Errorf("DeviationTo and WidenBy allocate %v times a call, want 0", n)
	}
}
