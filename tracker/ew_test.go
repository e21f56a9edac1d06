package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"modewatch/tracker/modes"
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

// ar1Autocorr returns the autocorrelations φ^k of an AR(1) series at the
// lags SerialLag(m) (the process's own, Box & Jenkins; hand derivation).
func ar1Autocorr(phi float64) []float64 {
	out := make([]float64, SerialLags)
	for m := range out {
		out[m] = math.Pow(phi, float64(SerialLag(m)))
	}
	return out
}

// TestSerialFactorAR1: Bartlett's factor of two AR(1) series against its
// closed form Σ_k (φ_aφ_b)^|k| = (1 + φ_aφ_b)/(1 − φ_aφ_b) (geometric
// series; hand derivation), which the geometric steps between the
// sampled lags reproduce.
func TestSerialFactorAR1(t *testing.T) {
	for _, c := range []struct{ a, b float64 }{
		{0, 0}, {0.5, 0.5}, {0.9, 0.2}, {0.99, 0.99}, {0.995, 0.98}, {0.999, 0.999},
	} {
		got := SerialFactor(ar1Autocorr(c.a), ar1Autocorr(c.b))
		g := c.a * c.b
		want := (1 + g) / (1 - g)
		if !scalar.EqualWithinRel(got, want, 1e-9) {
			t.Errorf("φ %v, %v: S = %.10g, want %.10g", c.a, c.b, got, want)
		}
	}
	if s := SerialFactor(nil, ar1Autocorr(0.99)); s != 1 {
		t.Errorf("unknown autocorrelation: S = %v, want 1", s)
	}
}

// shrinkFrames returns n seeded frames of four channels: 0 and 1 are
// independent AR(1) series with φ = 0.995 (memory about 200 frames),
// 2 and 3 share such a series (loadings 1, noise σ 0.5 each: true
// correlation 0.8). Invented data.
func shrinkFrames(n int, seed uint64) [][]float64 {
	rng := rand.New(rand.NewPCG(seed, 7))
	const phi = 0.995
	e := math.Sqrt(1 - phi*phi)
	var a, b, f float64
	out := make([][]float64, n)
	for k := range out {
		a = phi*a + e*rng.NormFloat64()
		b = phi*b + e*rng.NormFloat64()
		f = phi*f + e*rng.NormFloat64()
		out[k] = []float64{a, b, f + 0.5*rng.NormFloat64(), f + 0.5*rng.NormFloat64()}
	}
	return out
}

// TestShrinkChannelKeepsTrueRelations: with the serial factors of the
// channels' AR(1) memories, ShrinkChannel takes the chance correlation
// of two independent slowly wandering channels to near zero (|r*| < 0.05)
// while the truly correlated pair keeps its sample correlation within
// 0.02; without shrinkage the model's correlations are gonum/stat's
// Pearson correlations of the same frames (a direct computation).
func TestShrinkChannelKeepsTrueRelations(t *testing.T) {
	const n = 4000
	frames := shrinkFrames(n, 12)
	col := func(j int) []float64 {
		c := make([]float64, n)
		for k, f := range frames {
			c[k] = f[j]
		}
		return c
	}
	r01 := stat.Correlation(col(0), col(1), nil)
	r23 := stat.Correlation(col(2), col(3), nil)
	// The chance correlation is several standard errors of white noise
	// (1/√n = 0.016) but within Bartlett's (√(200/4000) = 0.22).
	if math.Abs(r01) < 0.1 {
		t.Fatalf("seed gives chance correlation %.3f; the check needs one well away from 0", r01)
	}
	fit := func(rule ShrinkRule) *mat.SymDense {
		tr, err := New(4, Config{Period: time.Minute, Modes: modes.Config{Count: 1}})
		if err != nil {
			t.Fatal(err)
		}
		ar := ar1Autocorr(0.995)
		s := mat.NewSymDense(4, nil)
		SerialFactorsTo(s, [][]float64{ar, ar, ar, ar})
		tr.SetSerialFactors(s, rule)
		if err := tr.Fit(frames); err != nil {
			t.Fatal(err)
		}
		return tr.mdl.a
	}
	off := fit(ShrinkNone)
	for _, c := range []struct {
		i, j int
		want float64
	}{{0, 1, r01}, {2, 3, r23}} {
		if got := off.At(c.i, c.j); !scalar.EqualWithinAbs(got, c.want, 1e-9) {
			t.Errorf("no shrinkage: r(%d,%d) = %.6f, gonum/stat %.6f", c.i, c.j, got, c.want)
		}
	}
	on := fit(ShrinkChannel)
	if got := on.At(0, 1); math.Abs(got) > 0.05 {
		t.Errorf("independent wandering pair: shrunk r = %.3f (sample %.3f), want |r| < 0.05", got, r01)
	}
	if got := on.At(2, 3); !scalar.EqualWithinAbs(got, r23, 0.02) {
		t.Errorf("true pair: shrunk r = %.3f, sample %.3f (gonum/stat), want within 0.02", got, r23)
	}
	t.Logf("sample r01 %.3f r23 %.3f; shrunk %.3f %.3f", r01, r23, on.At(0, 1), on.At(2, 3))
}

// TestShrinkKeepsPSD: both rules keep a positive semidefinite correlation
// positive semidefinite (DRD + I − D², D diagonal in [0, 1]): the least
// eigenvalue (gonum's EigenSym, the reference) of the shrunk correlation
// of 12 channels, 6 of them wandering, is not below −1e-10.
func TestShrinkKeepsPSD(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	const p, n = 12, 600
	frames := make([][]float64, n)
	w := make([]float64, p)
	for k := range frames {
		f := rng.NormFloat64()
		frames[k] = make([]float64, p)
		for j := range w {
			if j < 6 {
				w[j] = 0.99*w[j] + 0.14*rng.NormFloat64()
				frames[k][j] = w[j]
			} else {
				frames[k][j] = f + 0.3*float64(j-5)*rng.NormFloat64()
			}
		}
	}
	rho := make([][]float64, p)
	for j := range rho {
		rho[j] = ar1Autocorr(0.99)
		if j >= 6 {
			rho[j] = ar1Autocorr(0)
		}
	}
	s := mat.NewSymDense(p, nil)
	SerialFactorsTo(s, rho)
	for _, rule := range []ShrinkRule{ShrinkWhole, ShrinkChannel} {
		tr, err := New(p, Config{Period: time.Minute, Modes: modes.Config{Count: 2}})
		if err != nil {
			t.Fatal(err)
		}
		tr.SetSerialFactors(s, rule)
		if err := tr.Fit(frames); err != nil {
			t.Fatal(err)
		}
		var es mat.EigenSym
		if !es.Factorize(tr.mdl.a, false) {
			t.Fatal("EigenSym failed")
		}
		if lo := es.Values(nil)[0]; lo < -1e-10 {
			t.Errorf("rule %d: least eigenvalue %g", rule, lo)
		}
	}
}
