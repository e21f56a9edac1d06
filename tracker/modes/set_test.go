package modes

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// TestSpikedRecovery: on the spiked sparse model (helpers_test.go) with
// p = 100 channels, three factors on k = 6 disjoint channels each, spike
// strengths θ = 6, 4, 3 over unit noise, and the sample covariance of
// n = 500 draws, every mode's support is exactly one factor's support.
// At θ = 3 the per-channel signal variance is θ·v_i² ≈ 0.5 of the noise.
// (Reference: the model's own construction; exact support recovery of the
// truncated power method at this SNR is what the test asserts.)
func TestSpikedRecovery(t *testing.T) {
	rng := rand.New(rand.NewPCG(2013, 55))
	const p, k = 100, 6
	for rep := 0; rep < 5; rep++ {
		m := newSpiked(rng, p, k, []float64{6, 4, 3}, 500)
		for _, c := range []struct {
			name string
			sp   Sparsity
			defl Deflation
		}{
			{"l0 projection", Sparsity{Method: L0, K: k}, Projection},
			{"l0 schur", Sparsity{Method: L0, K: k}, Schur},
			// ℓ0 penalty: at a fixed point entry i is kept iff
			// (Ax)_i² > γ·xᵀAx, i.e. λx_i² > γ (testdata/CONGRADU_NOTES.md §3(iii)). The
			// smallest factor loading has x_i² ≥ 0.25/(0.25 + 5) ≈ 0.05 and
			// λ ≈ 1 + θ ≥ 4, so λx_i² ≳ 0.2; noise entries of Ax are
			// O(√(λ/n)), λx_i² ≈ 1/n. γ = 0.1 lies between.
			{"l0pen projection", Sparsity{Method: L0Pen, Gamma: 0.1}, Projection},
		} {
			tr, err := NewSet(p, Config{Sparsity: []Sparsity{c.sp}, Count: 3, Deflation: c.defl})
			if err != nil {
				t.Fatal(err)
			}
			if err := tr.Refresh(m.a); err != nil {
				t.Fatal(err)
			}
			if tr.Count() != 3 {
				t.Fatalf("rep %d %s: %d modes", rep, c.name, tr.Count())
			}
			// Every factor's support is one mode's support (the order of the
			// two weaker factors may swap with sampling noise).
			used := make([]bool, 3)
			for f, want := range m.supports {
				found := false
				for j := 0; j < 3; j++ {
					if !used[j] && slices.Equal(tr.Mode(j).Support, want) {
						used[j], found = true, true
						break
					}
				}
				if !found {
					t.Errorf("rep %d %s: factor %d support %v not recovered; modes %v %v %v", rep, c.name, f, want,
						tr.Mode(0).Support, tr.Mode(1).Support, tr.Mode(2).Support)
				}
			}
		}
	}
}

// twoGroups returns a population covariance with two sparse modes on
// channels {0,1,2} (strength ta) and {5,6,7,8} (strength tb), plus unit noise.
func twoGroups(p int, ta, tb float64) *mat.SymDense {
	a := mat.NewSymDense(p, nil)
	for i := 0; i < p; i++ {
		a.SetSym(i, i, 1)
	}
	va := make([]float64, p)
	vb := make([]float64, p)
	for _, i := range []int{0, 1, 2} {
		va[i] = 1 / math.Sqrt(3)
	}
	for _, i := range []int{5, 6, 7, 8} {
		vb[i] = 0.5
	}
	vb[7] = -0.5
	a.SymRankOne(a, ta, mat.NewVecDense(p, va))
	a.SymRankOne(a, tb, mat.NewVecDense(p, vb))
	return a
}

// TestSetIdentity: IDs follow the groups of sensors. When the second
// group becomes the stronger one, a cold retry moves it to the first slot and
// its ID moves with it; without cold retries the warm start holds the old
// order (the stale local optimum the cold retry exists for).
func TestSetIdentity(t *testing.T) {
	const p = 12
	sp := []Sparsity{{Method: L0, K: 4}}
	before, after := twoGroups(p, 5, 3), twoGroups(p, 3, 5)
	groupA, groupB := []int{0, 1, 2}, []int{5, 6, 7, 8}

	tr, err := NewSet(p, Config{Sparsity: sp, Count: 2, ColdEvery: 1, Refit: RefitNever})
	if err != nil {
		t.Fatal(err)
	}
	if err := tr.Refresh(before); err != nil {
		t.Fatal(err)
	}
	// Group A (3 channels) with k = 4 leaves one loading free; a noise
	// channel adds nothing there, so check where the loadings' mass is
	// rather than the exact support.
	mass := func(x []float64, idx []int) float64 {
		var s float64
		for _, i := range idx {
			s += x[i] * x[i]
		}
		return s
	}
	m0, m1 := tr.Mode(0), tr.Mode(1)
	if mass(m0.Loadings, groupA) < 0.999 || mass(m1.Loadings, groupB) < 0.999 {
		t.Fatalf("before: mode supports %v, %v", m0.Support, m1.Support)
	}
	idA, idB := m0.ID, m1.ID
	if err := tr.Refresh(after); err != nil {
		t.Fatal(err)
	}
	n0, n1 := tr.Mode(0), tr.Mode(1)
	if mass(n0.Loadings, groupB) < 0.999 || mass(n1.Loadings, groupA) < 0.999 {
		t.Fatalf("after (cold retry): supports %v, %v", n0.Support, n1.Support)
	}
	if n0.ID != idB || n1.ID != idA {
		t.Errorf("after swap: IDs %d, %d; want %d (group B), %d (group A)", n0.ID, n1.ID, idB, idA)
	}
	if !n0.Cold {
		t.Errorf("the stronger group should come from the cold retry")
	}

	// Without cold retries the warm start keeps group A in slot 0.
	tw, _ := NewSet(p, Config{Sparsity: sp, Count: 2, ColdEvery: -1, Refit: RefitNever})
	if err := tw.Refresh(before); err != nil {
		t.Fatal(err)
	}
	if err := tw.Refresh(after); err != nil {
		t.Fatal(err)
	}
	if mass(tw.Mode(0).Loadings, groupA) < 0.999 || tw.Mode(0).ID != 1 || tw.Mode(1).ID != 2 {
		t.Errorf("warm only: slot 0 support %v id %d", tw.Mode(0).Support, tw.Mode(0).ID)
	}

	// A different group of sensors gets a new ID.
	c := mat.NewSymDense(p, nil)
	for i := 0; i < p; i++ {
		c.SetSym(i, i, 1)
	}
	v := make([]float64, p)
	v[10], v[11] = math.Sqrt(0.5), math.Sqrt(0.5)
	c.SymRankOne(c, 8, mat.NewVecDense(p, v))
	if err := tr.Refresh(c); err != nil {
		t.Fatal(err)
	}
	if id := tr.Mode(0).ID; id == idA || id == idB {
		t.Errorf("new group {10, 11} inherited ID %d", id)
	}
}

// TestSetSign: the largest-magnitude loading of every mode is positive
// (common practice for reporting PCA loadings; the rule of the issue).
func TestSetSign(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for rep := 0; rep < 20; rep++ {
		m := newSpiked(rng, 30, 4, []float64{5, 3}, 200)
		tr, _ := NewSet(30, Config{Sparsity: []Sparsity{{Method: L1PenSqrt, Gamma: 0.3}}, Count: 2})
		for it := 0; it < 2; it++ {
			if err := tr.Refresh(m.a); err != nil {
				t.Fatal(err)
			}
			for j := 0; j < tr.Count(); j++ {
				x := tr.Mode(j).Loadings
				best := 0
				for i := range x {
					if math.Abs(x[i]) > math.Abs(x[best]) {
						best = i
					}
				}
				if x[best] <= 0 {
					t.Fatalf("rep %d mode %d: largest loading x[%d] = %g", rep, j, best, x[best])
				}
			}
		}
	}
}

// TestSetAdjustedVariance compares the set's adjusted variances
// and score covariance with gonum: VᵀAV by mat products and R_jj² from
// mat.Cholesky (Zou, Hastie & Tibshirani 2006, adjusted variance = R_jj²).
func TestSetAdjustedVariance(t *testing.T) {
	a := loadPitprops(t)
	for _, d := range []Deflation{Projection, Schur} {
		tr, _ := NewSet(13, Config{Sparsity: []Sparsity{{Method: L0, K: 7}, {Method: L0, K: 4}, {Method: L0, K: 4}, {Method: L0, K: 1}},
			Count: 4, Deflation: d})
		if err := tr.Refresh(a); err != nil {
			t.Fatal(err)
		}
		v := tr.Loadings()
		var av, g mat.Dense
		av.Mul(a, v)
		g.Mul(v.T(), &av)
		gs := mat.NewSymDense(4, nil)
		for i := 0; i < 4; i++ {
			for j := i; j < 4; j++ {
				gs.SetSym(i, j, g.At(i, j))
			}
		}
		var ch mat.Cholesky
		if !ch.Factorize(gs) {
			t.Fatal("VᵀAV not positive definite")
		}
		var u mat.TriDense
		ch.UTo(&u)
		var sc mat.SymDense
		tr.ScoreCovTo(&sc)
		for j := 0; j < 4; j++ {
			want := u.At(j, j) * u.At(j, j)
			if got := tr.Mode(j).AdjustedVariance; !scalar.EqualWithinAbsOrRel(got, want, 1e-12, 1e-10) {
				t.Errorf("%v mode %d: adjusted variance %.12f, gonum Cholesky %.12f", d, j, got, want)
			}
			if got := tr.Mode(j).Variance; !scalar.EqualWithinAbsOrRel(got, g.At(j, j), 1e-12, 1e-10) {
				t.Errorf("%v mode %d: variance %.12f, vᵀAv %.12f", d, j, got, g.At(j, j))
			}
			for i := 0; i < 4; i++ {
				if !scalar.EqualWithinAbsOrRel(sc.At(i, j), g.At(i, j), 1e-12, 1e-10) {
					t.Errorf("%v ScoreCov[%d,%d] = %g, VᵀAV %g", d, i, j, sc.At(i, j), g.At(i, j))
				}
			}
		}
	}
}

// TestSetAutoCount: with dense modes the adjusted variances are the
// eigenvalues, so the automatic count follows the cumulative shares of the
// Pitprops eigenvalues in REFERENCE.md: 32.45, 50.74, 65.19, 73.72, 80.72,
// 86.998 % (first six 87.00 %).
func TestSetAutoCount(t *testing.T) {
	// Kaiser's rule off; share 1 stops one short of p (the residual minimum).
	checkPitpropsCounts(t, []countCase{
		{share: 0.30, want: 1}, {share: 0.50, want: 2}, {share: 0.80, want: 5},
		{share: 0.86, want: 6}, {share: 0.871, want: 7}, {share: 1, want: 12},
	})
	a := loadPitprops(t)
	tr, _ := NewSet(13, Config{Share: 0.5, MaxCount: 13, Tol: 1e-10})
	_ = tr.Refresh(a)
	// Eigenvalues 4.218633, 2.378101 (REFERENCE.md).
	for j, want := range []float64{4.218633, 2.378101} {
		if got := tr.Mode(j).AdjustedVariance; !scalar.EqualWithinAbs(got, want, 1e-6) {
			t.Errorf("dense mode %d: adjusted variance %.7f, eigenvalue %.6f", j, got, want)
		}
	}
}

// countCase is a Set configuration on Pitprops (13 channels, MaxCount 13,
// Tol 1e-10) and the number of modes it should keep: Share, MinCount
// (floor) and MinAdjusted (rel).
type countCase struct {
	share float64
	floor int
	rel   float64
	want  int
}

// checkPitpropsCounts refreshes a Set configured by each case once on the
// Pitprops correlation matrix and checks its mode count.
func checkPitpropsCounts(t *testing.T, cases []countCase) {
	t.Helper()
	a := loadPitprops(t)
	for _, c := range cases {
		tr, err := NewSet(13, Config{Share: c.share, MaxCount: 13, MinCount: c.floor, Tol: 1e-10, MinAdjusted: c.rel})
		if err != nil {
			t.Fatal(err)
		}
		if err := tr.Refresh(a); err != nil {
			t.Fatal(err)
		}
		if tr.Count() != c.want {
			t.Errorf("share %g, MinCount %d, MinAdjusted %g: %d modes, want %d", c.share, c.floor, c.rel, tr.Count(), c.want)
		}
	}
}

// TestSetKaiser: with MinAdjusted 1 the automatic count keeps
// the modes whose eigenvalue exceeds 1, four on Pitprops (eigenvalues
// 4.218633, 2.378101, 1.878226, 1.109390, 0.910047, … in REFERENCE.md),
// whatever the share asks; Jolliffe's 0.7 keeps six (0.815413 > 0.7 >
// 0.576345); with the rule off, share 0.95 needs nine (cumulative 12.326
// of 13 after eight, 12.678 after nine).
func TestSetKaiser(t *testing.T) {
	checkPitpropsCounts(t, []countCase{
		{rel: 1, share: 0.95, want: 4}, {rel: 1, share: 0.5, want: 2},
		{rel: 0.7, share: 0.95, want: 6}, {rel: 0, share: 0.95, want: 9},
	})
}

// TestSetMinCount: MinCount is a floor on the Share rule only. On
// Pitprops (eigenvalues in REFERENCE.md) share 0.5 stops at 2 modes; a
// floor of 5 keeps 5, a floor of 13 stops at the residual minimum (12 of
// 13 channels), a floor below the Share count changes nothing, and
// Kaiser's rule (MinAdjusted 1: four eigenvalues above 1) still stops at 4
// under a floor of 6. A fixed Count with a floor is a configuration error.
func TestSetMinCount(t *testing.T) {
	checkPitpropsCounts(t, []countCase{
		{share: 0.5, floor: 0, want: 2}, {share: 0.5, floor: 5, want: 5},
		{share: 0.5, floor: 13, want: 12}, {share: 0.8, floor: 3, want: 5},
		{share: 0.5, floor: 6, rel: 1, want: 4},
	})
	if _, err := NewSet(13, Config{Count: 3, MinCount: 4}); !errors.Is(err, ErrConfig) {
		t.Errorf("Count 3 with MinCount 4: err %v, want ErrConfig", err)
	}
	if _, err := NewSet(13, Config{MinCount: -1}); !errors.Is(err, ErrConfig) {
		t.Errorf("MinCount -1: err %v, want ErrConfig", err)
	}
}

// TestSetRankExhausted: a rank-one matrix has one mode; asking for
// three gives one, with no error and no NaN.
func TestSetRankExhausted(t *testing.T) {
	u := []float64{1, 2, 0, 2}
	a := mat.NewSymDense(4, nil)
	a.SymRankOne(a, 1, mat.NewVecDense(4, u))
	for _, d := range []Deflation{Projection, Schur} {
		tr, _ := NewSet(4, Config{Count: 3, Deflation: d})
		if err := tr.Refresh(a); err != nil {
			t.Fatal(err)
		}
		if tr.Count() != 1 {
			t.Errorf("%v: %d modes, want 1", d, tr.Count())
		}
		if m := tr.Mode(0); !scalar.EqualWithinAbs(m.Variance, 9, 1e-9) {
			t.Errorf("%v: variance %g, want ‖u‖² = 9", d, m.Variance)
		}
	}
}

// TestSetErrorsKeepState: a bad matrix is an error and leaves the
// previous modes in place; a later good matrix works.
func TestSetErrorsKeepState(t *testing.T) {
	a := loadPitprops(t)
	tr, _ := NewSet(13, Config{Sparsity: []Sparsity{{Method: L0, K: 5}}, Count: 2})
	if err := tr.Refresh(a); err != nil {
		t.Fatal(err)
	}
	want := append([]float64(nil), tr.Mode(0).Loadings...)
	bad := func(i, j int, v float64) *mat.SymDense {
		b := mat.NewSymDense(13, nil)
		b.CopySym(a)
		b.SetSym(i, j, v)
		return b
	}
	for _, c := range []struct {
		name string
		a    *mat.SymDense
		want error
	}{
		{"NaN in a touched column", bad(0, 1, math.NaN()), ErrNotFinite},
		{"Inf on the diagonal", bad(3, 3, math.Inf(1)), ErrNotFinite},
		{"negative variance", bad(2, 2, -1), ErrNotPSD},
		{"zero", mat.NewSymDense(13, nil), ErrZeroMatrix},
		{"wrong size", mat.NewSymDense(12, nil), ErrConfig},
	} {
		if err := tr.Refresh(c.a); !errors.Is(err, c.want) {
			t.Errorf("%s: error %v, want %v", c.name, err, c.want)
		}
		if tr.Count() != 2 || !slices.Equal(tr.Mode(0).Loadings, want) {
			t.Fatalf("%s: state changed after the error", c.name)
		}
	}
	// A NaN in a column no warm solve touches is found by the cold pass.
	tc, _ := NewSet(13, Config{Sparsity: []Sparsity{{Method: L0, K: 5}}, Count: 1})
	if err := tc.Refresh(bad(10, 11, math.NaN())); !errors.Is(err, ErrNotFinite) {
		t.Errorf("cold refresh with NaN at (10,11): %v", err)
	}
	// l0pen with γ ≥ max A_ii.
	tp, _ := NewSet(13, Config{Sparsity: []Sparsity{{Method: L0Pen, Gamma: 1.5}}, Count: 1})
	if err := tp.Refresh(a); !errors.Is(err, ErrPenaltyTooHigh) {
		t.Errorf("l0pen:1.5 on a correlation matrix: %v", err)
	}
	// The squared ℓ1 penalty too large: no modes, no error.
	te, _ := NewSet(13, Config{Sparsity: []Sparsity{{Method: L1Pen, Gamma: 4}}, Count: 2})
	if err := te.Refresh(a); err != nil || te.Count() != 0 || te.Loadings() != nil {
		t.Errorf("l1pen:4: err %v, %d modes", err, te.Count())
	}
}

// TestSetStuckChannels: channels whose variance drops to zero (a zero
// row) move a mode off them; a warm start lying wholly on zero rows falls
// back to the cold start.
func TestSetStuckChannels(t *testing.T) {
	const p = 12
	a := twoGroups(p, 5, 3)
	tr, _ := NewSet(p, Config{Sparsity: []Sparsity{{Method: L0, K: 3}}, Count: 2, ColdEvery: -1})
	if err := tr.Refresh(a); err != nil {
		t.Fatal(err)
	}
	b := mat.NewSymDense(p, nil)
	b.CopySym(a)
	for _, i := range []int{0, 1, 2} {
		for j := 0; j < p; j++ {
			b.SetSym(i, j, 0)
		}
	}
	if err := tr.Refresh(b); err != nil {
		t.Fatal(err)
	}
	for j := 0; j < tr.Count(); j++ {
		m := tr.Mode(j)
		for _, i := range m.Support {
			if i <= 2 {
				t.Errorf("mode %d keeps stuck channel %d: %v", j, i, m.Support)
			}
		}
		for _, v := range m.Loadings {
			if math.IsNaN(v) {
				t.Fatal("NaN loading")
			}
		}
	}
	if !tr.Mode(0).Cold {
		t.Errorf("slot 0 should have fallen back to the cold start")
	}
}

// TestRefreshNoAlloc: Refresh does not allocate after construction, warm
// or cold, for every method and both deflations (testing.AllocsPerRun).
func TestRefreshNoAlloc(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	const p = 60
	m1 := newSpiked(rng, p, 5, []float64{6, 4, 3}, 300)
	a2 := mat.NewSymDense(p, nil)
	a2.CopySym(m1.a)
	g := make([]float64, p)
	for i := range g {
		g[i] = rng.NormFloat64()
	}
	a2.ScaleSym(0.99, a2)
	a2.SymRankOne(a2, 0.01, mat.NewVecDense(p, g))
	sps := []Sparsity{{}, {Method: L0, K: 5}, {Method: L1, S: 2.5}, {Method: L0Pen, Gamma: 0.3},
		{Method: L1Pen, Gamma: 0.5}, {Method: L1PenSqrt, Gamma: 0.3}, {Method: LogPen, Gamma: 0.5, Eps: 0.1}, {Method: ExpPen, Gamma: 0.5, Eps: 0.1}}
	for _, sp := range sps {
		for _, d := range []Deflation{Projection, Schur} {
			for _, cold := range []int{-1, 1} {
				tr, err := NewSet(p, Config{Sparsity: []Sparsity{sp}, Count: 3, Deflation: d, ColdEvery: cold, EpsStages: 2})
				if err != nil {
					t.Fatal(err)
				}
				if err := tr.Refresh(m1.a); err != nil {
					t.Fatal(err)
				}
				i := 0
				n := testing.AllocsPerRun(10, func() {
					i++
					a := m1.a
					if i%2 == 1 {
						a = a2
					}
					if err := tr.Refresh(a); err != nil {
						t.Fatal(err)
					}
				})
				if n != 0 {
					t.Errorf("%v %v ColdEvery=%d: %v allocations per Refresh", sp, d, cold, n)
				}
			}
		}
	}
}

// TestSetWarmIterations: refreshing with the same matrix converges at
// once from the warm start, and the iterations per mode are reported.
func TestSetWarmIterations(t *testing.T) {
	a := loadPitprops(t)
	tr, _ := NewSet(13, Config{Sparsity: []Sparsity{{Method: L0, K: 6}}, Count: 3, ColdEvery: -1})
	if err := tr.Refresh(a); err != nil {
		t.Fatal(err)
	}
	cold := tr.Iterations()
	for j := 0; j < 3; j++ {
		if m := tr.Mode(j); m.Iterations == 0 || !m.Cold || !m.Converged {
			t.Errorf("cold mode %d: %+v", j, m)
		}
	}
	if err := tr.Refresh(a); err != nil {
		t.Fatal(err)
	}
	for j := 0; j < 3; j++ {
		if m := tr.Mode(j); m.Iterations > 1 || m.Cold || !m.Converged {
			t.Errorf("warm mode %d: %d iterations, cold %v, converged %v", j, m.Iterations, m.Cold, m.Converged)
		}
	}
	if tr.Iterations() >= cold {
		t.Errorf("warm refresh %d iterations, cold %d", tr.Iterations(), cold)
	}
}

func TestNewSetErrors(t *testing.T) {
	cases := []struct {
		name string
		p    int
		cfg  Config
		want error
	}{
		{"p=0", 0, Config{}, ErrConfig},
		{"count>p", 3, Config{Count: 4}, ErrConfig},
		{"count<0", 3, Config{Count: -1}, ErrConfig},
		{"share>1", 3, Config{Share: 1.5}, ErrConfig},
		{"share<0", 3, Config{Share: -0.1}, ErrConfig},
		{"share with count", 3, Config{Count: 2, Share: 0.5}, ErrConfig},
		{"maxcount>p", 3, Config{MaxCount: 4}, ErrConfig},
		{"maxcount<count", 5, Config{Count: 3, MaxCount: 2}, ErrConfig},
		{"sparsity count", 5, Config{Count: 3, Sparsity: []Sparsity{{}, {}}}, ErrConfig},
		{"sparsity entries > p", 2, Config{Sparsity: []Sparsity{{}, {}, {}}}, ErrConfig},
		{"k>p", 5, Config{Count: 1, Sparsity: []Sparsity{{Method: L0, K: 6}}}, ErrSparsity},
		{"eps", 5, Config{Count: 1, Sparsity: []Sparsity{{Method: LogPen, Gamma: 1}}}, ErrSparsity},
		{"deflation", 5, Config{Count: 1, Deflation: 7}, ErrConfig},
		{"tol NaN", 5, Config{Count: 1, Tol: math.NaN()}, ErrConfig},
		{"maxiter", 5, Config{Count: 1, MaxIter: -1}, ErrConfig},
		{"matchmin", 5, Config{Count: 1, MatchMin: 2}, ErrConfig},
		{"start", 5, Config{Count: 1, Start: 9}, ErrConfig},
	}
	for _, c := range cases {
		if _, err := NewSet(c.p, c.cfg); !errors.Is(err, c.want) {
			t.Errorf("%s: error %v, want %v", c.name, err, c.want)
		}
	}
	// Defaults of the zero Config.
	tr, err := NewSet(20, Config{})
	if err != nil {
		t.Fatal(err)
	}
	cfg := tr.Config()
	if cfg.Share != DefaultShare || cfg.MaxCount != DefaultMaxCount || cfg.ColdEvery != DefaultColdEvery ||
		cfg.Tol != DefaultTol || cfg.MaxIter != DefaultMaxIter || len(cfg.Sparsity) != DefaultMaxCount {
		t.Errorf("defaults: %+v", cfg)
	}
}

// TestSetWarmEmptyFallsBackCold: a penalty that empties the warm start
// (its group went quiet) does not end the extraction; the cold start finds
// the group that is active now. With γ = 1.5 the squared ℓ1 threshold is
// 0.75: the quiet group has |(Ax)_i| = 1/√3 ≈ 0.58 < 0.75 (unit noise only),
// the active one 0.5·(1 + 5) = 3 (hand derivation from twoGroups).
func TestSetWarmEmptyFallsBackCold(t *testing.T) {
	const p = 12
	tr, _ := NewSet(p, Config{Sparsity: []Sparsity{{Method: L1Pen, Gamma: 1.5}}, Count: 1, ColdEvery: -1})
	if err := tr.Refresh(twoGroups(p, 5, 3)); err != nil {
		t.Fatal(err)
	}
	if got := tr.Mode(0).Support; !slices.Equal(got, []int{0, 1, 2}) {
		t.Fatalf("first refresh: support %v, want [0 1 2]", got)
	}
	if err := tr.Refresh(twoGroups(p, 0, 5)); err != nil {
		t.Fatal(err)
	}
	if tr.Count() != 1 {
		t.Fatalf("%d modes after the warm start emptied", tr.Count())
	}
	if m := tr.Mode(0); !slices.Equal(m.Support, []int{5, 6, 7, 8}) || !m.Cold {
		t.Errorf("second refresh: support %v cold %v, want [5 6 7 8] from the cold start", m.Support, m.Cold)
	}
}

// TestWarmMatchesCold: after a small covariance change (one exponentially
// weighted sample, the benchmark's change), the warm refresh lands on the
// same modes as a cold solve of the new matrix, with fewer iterations.
// Variances agree to 1e-6 relative: later modes inherit the 1e-6 step
// tolerance of the earlier ones through the deflation. (Not asserted for
// L0Pen: on this matrix its warm and cold starts end at two different fixed
// points, the warm one with the larger penalised objective; both are valid.)
func TestWarmMatchesCold(t *testing.T) {
	a1, a2 := benchMatrices(100)
	for _, sp := range []Sparsity{{Method: L0, K: 10}, {Method: L1PenSqrt, Gamma: 0.5}, {Method: L1, S: 2.5}} {
		for _, d := range []Deflation{Projection, Schur} {
			cfg := Config{Sparsity: []Sparsity{sp}, Count: 5, ColdEvery: -1, Deflation: d}
			warm, _ := NewSet(100, cfg)
			cold, _ := NewSet(100, cfg)
			if err := warm.Refresh(a1); err != nil {
				t.Fatal(err)
			}
			if err := warm.Refresh(a2); err != nil {
				t.Fatal(err)
			}
			if err := cold.Refresh(a2); err != nil {
				t.Fatal(err)
			}
			if warm.Count() != cold.Count() {
				t.Fatalf("%v %v: warm %d modes, cold %d", sp, d, warm.Count(), cold.Count())
			}
			for j := 0; j < cold.Count(); j++ {
				w, c := warm.Mode(j), cold.Mode(j)
				if !slices.Equal(w.Support, c.Support) || !scalar.EqualWithinAbsOrRel(w.Variance, c.Variance, 1e-6, 1e-6) {
					t.Errorf("%v %v mode %d: warm %v %.10f, cold %v %.10f", sp, d, j, w.Support, w.Variance, c.Support, c.Variance)
				}
			}
			if warm.Iterations() >= cold.Iterations() {
				t.Errorf("%v %v: warm %d iterations, cold %d", sp, d, warm.Iterations(), cold.Iterations())
			}
		}
	}
}
