package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

func approx(t *testing.T, name string, got, want, abs, rel float64) {
	t.Helper()
	if !scalar.EqualWithinAbsOrRel(got, want, abs, rel) {
		t.Errorf("%s = %.12g, want %.12g (abs %g, rel %g)", name, got, want, abs, rel)
	}
}

func covOf(e *EW) *mat.SymDense {
	c := mat.NewSymDense(e.P(), nil)
	e.CovTo(c)
	return c
}

// A1, A2, A3: EW recursion with μ = 0.9 from b = x₁, C = 0 (hand computation).
func TestEWFixtureA1(t *testing.T) {
	xs := [][]float64{{1, 2}, {2, 1}, {4, 3}, {3, 5}, {5, 4}}
	wantB := [][]float64{{1.1, 1.9}, {1.39, 2.01}, {1.551, 2.309}, {1.8959, 2.4781}}
	for _, batch := range []int{1, 3, 64} {
		e := NewEW(2, 0.9, batch, false)
		for k, x := range xs {
			e.Update(x, nil)
			if k >= 1 {
				approx(t, "A1 b0", e.Mean(0), wantB[k-1][0], 0, 1e-12)
				approx(t, "A1 b1", e.Mean(1), wantB[k-1][1], 0, 1e-12)
			}
		}
		c := covOf(e)
		approx(t, "A1 C00", c.At(0, 0), 1.95926319, 0, 1e-12)
		approx(t, "A1 C01", c.At(0, 1), 1.08177021, 0, 1e-12)
		approx(t, "A1 C11", c.At(1, 1), 1.13532039, 0, 1e-12)
		approx(t, "A1 var0 = C00", e.Var(0), c.At(0, 0), 0, 1e-13)
		// A3: Kish n_eff of the weights (0.6561, 0.0729, 0.081, 0.09, 0.1).
		approx(t, "A3 n_eff", e.NEff(0), 2.1718233, 0, 1e-7)
	}
	// A2: the direct weighted sum with the weights of A1.
	w := []float64{0.6561, 0.0729, 0.081, 0.09, 0.1}
	var b [2]float64
	for k, x := range xs {
		b[0] += w[k] * x[0]
		b[1] += w[k] * x[1]
	}
	approx(t, "A2 b0", b[0], 1.8959, 0, 1e-12)
	var c00, c01 float64
	for k, x := range xs {
		c00 += w[k] * (x[0] - b[0]) * (x[0] - b[0])
		c01 += w[k] * (x[0] - b[0]) * (x[1] - b[1])
	}
	approx(t, "A2 C00", c00, 1.95926319, 0, 1e-12)
	approx(t, "A2 C01", c01, 1.08177021, 0, 1e-12)
}

// A4: a step 0 → 1 into an EW mean reaches 1 − μⁿ after n frames (μ = 0.99) [derived].
func TestEWStepResponse(t *testing.T) {
	e := NewEW(1, 0.99, 16, false)
	e.Update([]float64{0}, nil)
	want := map[int]float64{100: 0.6339677, 299: 0.950464, 460: 0.990178}
	for n := 1; n <= 460; n++ {
		e.Update([]float64{1}, nil)
		if w, ok := want[n]; ok {
			approx(t, "A4", e.Mean(0), w, 1e-6, 0)
			approx(t, "A4 exact", e.Mean(0), 1-math.Pow(0.99, float64(n)), 0, 1e-9)
		}
	}
}

// A7: half-life mapping μ = 2^(−Δt/H) (the definition of a half-life: the
// weight halves after H).
func TestForgetting(t *testing.T) {
	for _, c := range []struct {
		dt, h              time.Duration
		mu, memory, steady float64
	}{
		{time.Second, time.Hour, 0.9998074777, 5194.202, 10387.40},
		{10 * time.Second, time.Hour, 0.9980764436, 519.870, 1038.741},
		{time.Minute, 24 * time.Hour, 0.9995187636, 2077.981, 4154.962},
		{time.Second, 69 * time.Second, 0.9900046773, 100.047, 199.094},
	} {
		mu := Forgetting(c.dt, c.h)
		approx(t, "A7 μ", mu, c.mu, 0, 1e-9)
		// Printed to 3 decimals (2 for the Kish value 10387.40).
		approx(t, "A7 1/(1−μ)", 1/(1-mu), c.memory, 5e-4, 0)
		approx(t, "A7 Kish", SteadyNEff(mu), c.steady, 5e-3, 0)
	}
	// The Kish recursion converges to (1+μ)/(1−μ).
	mu := Forgetting(10*time.Second, time.Hour)
	e := NewEW(1, mu, 1, false)
	for i := 0; i < 40000; i++ {
		e.Update([]float64{float64(i % 7)}, nil)
	}
	approx(t, "A7 Kish recursion", e.NEff(0), 1038.741, 0, 1e-6)
	if Forgetting(time.Second, 0) != 1 {
		t.Error("zero half-life must mean no forgetting")
	}
}

// A8: the Finch update equals the forgetting-factor update of Li et al. (2000)
// per sample, b ← μb + (1−μ)x, C ← μ(C + ΔbΔbᵀ) + (1−μ)(x − b₊)(x − b₊)ᵀ [derived].
func TestEWEqualsLi(t *testing.T) {
	const p = 4
	mu := 0.97
	rng := rand.New(rand.NewPCG(3, 4))
	e := NewEW(p, mu, 1, false)
	b := make([]float64, p)
	c := mat.NewSymDense(p, nil)
	x := make([]float64, p)
	for k := 0; k < 300; k++ {
		for i := range x {
			x[i] = 10*float64(i) + rng.NormFloat64()
		}
		e.Update(x, nil)
		if k == 0 {
			copy(b, x)
			continue
		}
		db := make([]float64, p)
		r := make([]float64, p)
		for i := range b {
			nb := mu*b[i] + (1-mu)*x[i]
			db[i] = nb - b[i]
			b[i] = nb
			r[i] = x[i] - b[i]
		}
		for i := 0; i < p; i++ {
			for j := i; j < p; j++ {
				c.SetSym(i, j, mu*(c.At(i, j)+db[i]*db[j])+(1-mu)*r[i]*r[j])
			}
		}
	}
	got := covOf(e)
	for i := 0; i < p; i++ {
		approx(t, "A8 b", e.Mean(i), b[i], 0, 1e-13)
		for j := i; j < p; j++ {
			approx(t, "A8 C", got.At(i, j), c.At(i, j), 1e-15, 1e-12)
		}
	}
}

// A6: a batch of B frames folded by one rank-B update equals B single
// updates within 1e-12 relative (algebraic identity [derived]); also through the
// cumulative start-up, where the step changes from frame to frame.
func TestEWBatchEqualsSingle(t *testing.T) {
	const p, n = 37, 501
	rng := rand.New(rand.NewPCG(5, 6))
	xs := make([][]float64, n)
	for k := range xs {
		xs[k] = make([]float64, p)
		for i := range xs[k] {
			xs[k][i] = 100 + 3*rng.NormFloat64() + 0.5*float64(i)
		}
	}
	for _, cum := range []bool{false, true} {
		single := NewEW(p, 0.99, 1, cum)
		batched := NewEW(p, 0.99, 64, cum)
		for _, x := range xs {
			single.Update(x, nil)
			batched.Update(x, nil)
		}
		cs, cb := covOf(single), covOf(batched)
		worst := 0.0
		for i := 0; i < p; i++ {
			for j := i; j < p; j++ {
				if d := math.Abs(cs.At(i, j)-cb.At(i, j)) / math.Max(math.Abs(cs.At(i, j)), 1e-300); d > worst && math.Abs(cs.At(i, j)) > 1e-3 {
					worst = d
				}
				if !scalar.EqualWithinAbsOrRel(cs.At(i, j), cb.At(i, j), 1e-12*math.Sqrt(cs.At(i, i)*cs.At(j, j)), 1e-12) {
					t.Fatalf("cumulative=%v: C[%d,%d] batched %v single %v", cum, i, j, cb.At(i, j), cs.At(i, j))
				}
			}
		}
		t.Logf("cumulative=%v: worst relative difference batched vs single %.2g", cum, worst)
	}
}

// The EW covariance equals a directly computed weighted covariance, a plain
// O(N p²) weighted sum Σₖ wₖ(xₖ − b)(xₖ − b)ᵀ with the normalised weights of
// the recursion (wₖ = αₖ Π_{j>k}(1 − αⱼ)), within 1e-10 (issue 3; Finch 2009).
func TestEWEqualsWeightedSum(t *testing.T) {
	const p, n = 12, 3000
	rng := rand.New(rand.NewPCG(8, 9))
	xs := make([][]float64, n)
	lat := 0.0
	for k := range xs {
		lat = 0.95*lat + rng.NormFloat64()
		xs[k] = make([]float64, p)
		for i := range xs[k] {
			xs[k][i] = 50*float64(i+1) + float64(i%3+1)*lat + rng.NormFloat64()
		}
	}
	for _, cum := range []bool{false, true} {
		mu := Forgetting(time.Second, 2*time.Minute)
		e := NewEW(p, mu, 32, cum)
		alphas := make([]float64, n)
		for k, x := range xs {
			alphas[k] = e.step(float64(k + 1))
			e.Update(x, nil)
		}
		w := make([]float64, n)
		tail := 1.0
		for k := n - 1; k >= 0; k-- {
			w[k] = alphas[k] * tail
			tail *= 1 - alphas[k]
		}
		b := make([]float64, p)
		sw, sw2 := 0.0, 0.0
		for k, x := range xs {
			sw += w[k]
			sw2 += w[k] * w[k]
			for i := range b {
				b[i] += w[k] * x[i]
			}
		}
		approx(t, "Σw", sw, 1, 0, 1e-12)
		ref := mat.NewSymDense(p, nil)
		for k, x := range xs {
			for i := 0; i < p; i++ {
				for j := i; j < p; j++ {
					ref.SetSym(i, j, ref.At(i, j)+w[k]*(x[i]-b[i])*(x[j]-b[j]))
				}
			}
		}
		got := covOf(e)
		for i := 0; i < p; i++ {
			approx(t, "mean", e.Mean(i), b[i], 0, 1e-10)
			approx(t, "Kish", e.NEff(i), 1/sw2, 0, 1e-10)
			for j := i; j < p; j++ {
				approx(t, "cov vs weighted sum", got.At(i, j), ref.At(i, j), 1e-10*math.Sqrt(ref.At(i, i)*ref.At(j, j)), 1e-10)
			}
		}
	}
}

// Missing channels: a frame leaves the mean, variance and covariance of its
// missing channels unchanged, updates the observed block exactly like a frame
// over the observed channels only, and keeps C positive semidefinite.
func TestEWMissing(t *testing.T) {
	const p = 6
	rng := rand.New(rand.NewPCG(10, 11))
	e := NewEW(p, 0.95, 8, true)
	sub := NewEW(3, 0.95, 8, true) // channels 0, 2, 4 only
	x := make([]float64, p)
	obs := make([]bool, p)
	for k := 0; k < 400; k++ {
		for i := range x {
			x[i] = rng.NormFloat64() + float64(i)
		}
		for i := range obs {
			obs[i] = i%2 == 0 || k%5 != 0
		}
		var before [p]float64
		e.VarTo(before[:])
		e.Update(x, obs)
		if k%5 == 0 && k > 0 {
			for i := 1; i < p; i += 2 {
				if e.Var(i) != before[i] {
					t.Fatalf("missing channel %d variance changed", i)
				}
			}
		}
		sub.Update([]float64{x[0], x[2], x[4]}, nil)
	}
	c, cs := covOf(e), covOf(sub)
	for a, i := range []int{0, 2, 4} {
		for b, j := range []int{0, 2, 4} {
			approx(t, "observed block", c.At(i, j), cs.At(a, b), 1e-12, 1e-10)
		}
	}
	var es mat.EigenSym
	es.Factorize(c, false)
	if v := es.Values(nil); v[0] < -1e-12 {
		t.Errorf("covariance not PSD after missing frames: λmin = %v", v[0])
	}
}

// CorrTo returns a unit-diagonal correlation and zero rows for excluded channels.
func TestEWCorr(t *testing.T) {
	e := NewEW(3, 0.9, 4, true)
	rng := rand.New(rand.NewPCG(1, 1))
	for k := 0; k < 100; k++ {
		z := rng.NormFloat64()
		e.Update([]float64{10 * z, 5, -z + 0.1*rng.NormFloat64()}, nil)
	}
	a := mat.NewSymDense(3, nil)
	e.CorrTo(a, []bool{true, false, true})
	approx(t, "diag", a.At(0, 0), 1, 0, 1e-15)
	if a.At(1, 1) != 0 || a.At(0, 1) != 0 {
		t.Error("excluded channel not zeroed")
	}
	c := covOf(e)
	approx(t, "corr", a.At(0, 2), c.At(0, 2)/math.Sqrt(c.At(0, 0)*c.At(2, 2)), 0, 1e-14)
}

// Frames with missing channels and channels in different start-up stages
// go through the batch like complete ones: the batched covariance (rank-64
// updates with per-channel steps) equals the per-frame congruence
// C ← SCS + uuᵀ (sᵢ = √(1 − αᵢ), uᵢ = √(αᵢ(1 − αᵢ))δᵢ, sᵢ = 1 and uᵢ = 0 when
// missing; Finch 2009 on the observed block) computed directly in plain
// loops, within 1e-12 relative; and complete frames after missing ones
// still batch.
func TestEWBatchMissingEqualsDirect(t *testing.T) {
	const p, n = 9, 700
	rng := rand.New(rand.NewPCG(12, 13))
	e := NewEW(p, 0.98, 64, true)
	mean := make([]float64, p)
	count := make([]float64, p)
	c := make([]float64, p*p)
	x := make([]float64, p)
	obs := make([]bool, p)
	s := make([]float64, p)
	u := make([]float64, p)
	for k := 0; k < n; k++ {
		lat := rng.NormFloat64()
		for i := range x {
			x[i] = 10*float64(i) + float64(i%4)*lat + rng.NormFloat64()
			// channel 8 appears at frame 300; others miss now and then
			obs[i] = rng.IntN(10) != 0 && (i != 8 || k >= 300)
		}
		if k%7 == 3 {
			for i := range obs {
				obs[i] = i != 8 || k >= 300
			}
		}
		for i := range x {
			s[i], u[i] = 1, 0
			if !obs[i] {
				continue
			}
			count[i]++
			a := 1.0
			if count[i] > 1 {
				a = math.Max(1-0.98, 1/count[i])
			}
			d := x[i] - mean[i]
			mean[i] += a * d
			s[i], u[i] = math.Sqrt(1-a), math.Sqrt(a*(1-a))*d
		}
		for i := 0; i < p; i++ {
			for j := 0; j < p; j++ {
				c[i*p+j] = s[i]*c[i*p+j]*s[j] + u[i]*u[j]
			}
		}
		e.Update(x, obs)
	}
	got := covOf(e)
	for i := 0; i < p; i++ {
		approx(t, "mean", e.Mean(i), mean[i], 0, 1e-12)
		for j := i; j < p; j++ {
			approx(t, "cov vs direct congruence", got.At(i, j), c[i*p+j], 1e-12*math.Sqrt(c[i*p+i]*c[j*p+j]), 1e-12)
		}
	}
	// A complete frame after missing ones joins the batch.
	for i := range obs {
		obs[i] = true
	}
	before := e.nb
	e.Update(x, nil)
	if e.nb != before+1 {
		t.Errorf("complete frame after missing ones not batched (nb %d → %d)", before, e.nb)
	}
}
