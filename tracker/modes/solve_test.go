package modes

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// noSparsity returns every variant with its sparsity switched off
// (k = p, s = √p, γ = 0) for a p × p matrix.
func noSparsity(p int) []Sparsity {
	return []Sparsity{
		{Method: Dense},
		{Method: L0, K: p},
		{Method: L1, S: math.Sqrt(float64(p))},
		{Method: L0Pen, Gamma: 0},
		{Method: L1Pen, Gamma: 0},
		{Method: L1PenSqrt, Gamma: 0},
		{Method: LogPen, Gamma: 0, Eps: 0.1},
		{Method: ExpPen, Gamma: 0, Eps: 0.1},
	}
}

// TestNoSparsityMatchesEigenSym: without sparsity every variant must return
// the leading eigenpair of gonum's mat.EigenSym (the reference library)
// within 1e-8, on Pitprops and on seeded random PSD (Wishart) matrices.
func TestNoSparsityMatchesEigenSym(t *testing.T) {
	mats := []struct {
		name string
		a    *mat.SymDense
	}{{"pitprops", loadPitprops(t)}}
	rng := rand.New(rand.NewPCG(2, 11))
	for _, p := range []int{3, 8, 20, 40} {
		for rep := 0; rep < 2; rep++ {
			mats = append(mats, struct {
				name string
				a    *mat.SymDense
			}{fmt.Sprintf("wishart p=%d #%d", p, rep), randomPSD(rng, p, p)})
		}
	}
	for _, m := range mats {
		p := m.a.SymmetricDim()
		val, vec := leadingEigen(t, m.a)
		x := make([]float64, p)
		ws := NewWorkspace(p)
		for _, sp := range noSparsity(p) {
			t.Run(m.name+"/"+sp.String(), func(t *testing.T) {
				res, err := Solve(x, m.a, sp, &Options{Tol: 1e-13, MaxIter: 200000}, ws)
				if err != nil {
					t.Fatal(err)
				}
				if !res.Converged {
					t.Errorf("not converged after %d iterations", res.Iterations)
				}
				if !scalar.EqualWithinAbsOrRel(res.Variance, val, 1e-8, 1e-8) {
					t.Errorf("xᵀAx = %.12g, EigenSym λ₁ = %.12g", res.Variance, val)
				}
				for i := range x {
					if !scalar.EqualWithinAbs(x[i], vec[i], 1e-8) {
						t.Errorf("x[%d] = %.12f, EigenSym %.12f", i, x[i], vec[i])
						break
					}
				}
			})
		}
	}
}

// monotoneCases returns, for a p × p matrix with largest diagonal entry
// dmax, every variant with a parameter that makes it sparse.
func monotoneCases(p int, dmax float64, rng *rand.Rand) []Sparsity {
	k := 1 + rng.IntN(p)
	s := 1 + rng.Float64()*(math.Sqrt(float64(p))-1)
	g := rng.Float64() * dmax
	return []Sparsity{
		{Method: Dense},
		{Method: L0, K: k},
		{Method: L1, S: s},
		{Method: L0Pen, Gamma: 0.9 * g},
		{Method: L1Pen, Gamma: g},
		{Method: L1PenSqrt, Gamma: 0.9 * math.Sqrt(g)},
		{Method: LogPen, Gamma: g, Eps: 0.02 + 0.5*rng.Float64()},
		{Method: ExpPen, Gamma: g, Eps: 0.02 + 0.5*rng.Float64()},
	}
}

// TestMonotone: ConGradU never decreases its objective (Luss & Teboulle
// 2013; the ascent inequality f(x⁺) − f(x) ≥ γ(x) ≥ 0 is derived in
// testdata/CONGRADU_NOTES.md §2, and for the penalised and reweighted maps in §3(iii)–(v)).
// Checked from the first feasible iterate (starts need not be feasible),
// over 60 seeded matrices of three kinds and every variant, from the cold
// start and from a random warm start, with a relative slack of 1e-12.
func TestMonotone(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	var checked, steps int
	for rep := 0; rep < 60; rep++ {
		p := 4 + rng.IntN(30)
		var a *mat.SymDense
		switch rep % 3 {
		case 0:
			a = randomPSD(rng, p, 1+rng.IntN(2*p)) // may be rank deficient
		case 1:
			a = spikedCov(rng, p, 1+rng.IntN(3), 1+rng.IntN(max(1, min(p/3, 6))), 2+4*rng.Float64(), 0)
		default:
			a = randomPSD(rng, p, p)
			// scale matters for the penalties: use a matrix far from unit scale
			a.ScaleSym(0.01+10*rng.Float64(), a)
		}
		dmax := 0.0
		for i := 0; i < p; i++ {
			dmax = math.Max(dmax, a.At(i, i))
		}
		x := make([]float64, p)
		ws := NewWorkspace(p)
		for _, sp := range monotoneCases(p, dmax, rng) {
			for _, warm := range []bool{false, true} {
				var w []float64
				if warm {
					w = make([]float64, p)
					for i := range w {
						w[i] = rng.NormFloat64()
					}
				}
				prev, seen := math.Inf(-1), false
				var bad string
				opt := &Options{Tol: 1e-11, MaxIter: 300, Warm: w, Refit: RefitNever,
					Trace: func(it int, obj float64, feasible bool) {
						if !feasible {
							return
						}
						if seen && obj < prev-1e-12*math.Max(1, math.Abs(prev)) && bad == "" {
							bad = fmt.Sprintf("iteration %d: objective %.15g < %.15g", it, obj, prev)
						}
						prev, seen = obj, true
						steps++
					}}
				_, err := Solve(x, a, sp, opt, ws)
				if errors.Is(err, ErrPenaltyTooHigh) {
					continue
				}
				if err != nil {
					t.Fatalf("matrix %d (p=%d) %v: %v", rep, p, sp, err)
				}
				if bad != "" {
					t.Errorf("matrix %d (p=%d) %v warm=%v: %s", rep, p, sp, warm, bad)
				}
				checked++
			}
		}
	}
	t.Logf("%d runs, %d feasible iterates checked", checked, steps)
	if checked < 800 {
		t.Errorf("only %d runs checked", checked)
	}
}

// TestL1TieCase: when the largest |(Ax)_i| is attained m₁ > s² times the
// ℓ1/ℓ2 oracle has no root and the maximiser is (s/m₁)·sign on the tied
// entries, inside the ball (testdata/CONGRADU_NOTES.md §3(ii)). On A = 11ᵀ (p = 3) every
// (Ax)_i ties; max (Σx)² over ‖x‖₂ ≤ 1, ‖x‖₁ ≤ s is s² (hand derivation:
// Σx ≤ ‖x‖₁ ≤ s, attained at x = s/3·1), so with s = 1.5 the objective is
// 2.25 and the returned unit loadings are 1/√3 each (variance 3).
func TestL1TieCase(t *testing.T) {
	a := mat.NewSymDense(3, []float64{1, 1, 1, 1, 1, 1, 1, 1, 1})
	x := make([]float64, 3)
	res, err := Solve(x, a, Sparsity{Method: L1, S: 1.5}, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !scalar.EqualWithinAbs(res.Objective, 2.25, 1e-12) {
		t.Errorf("objective %.15g, want 2.25", res.Objective)
	}
	if !scalar.EqualWithinAbs(res.Variance, 3, 1e-12) || !res.Converged {
		t.Errorf("variance %.15g (converged %v), want 3", res.Variance, res.Converged)
	}
	for i, v := range x {
		if !scalar.EqualWithinAbs(v, 1/math.Sqrt(3), 1e-12) {
			t.Errorf("x[%d] = %g, want 1/√3", i, v)
		}
	}
}

// TestL1Oracle checks the exact ℓ1/ℓ2 step against its defining
// properties (testdata/CONGRADU_NOTES.md §3(ii)): the maximiser u of ⟨c, u⟩ over
// ‖u‖₂ ≤ 1, ‖u‖₁ ≤ s is S_λ(c)/‖S_λ(c)‖ with ‖u‖₁ = s when the ℓ1 bound is
// active, and no feasible vector does better (1000 random feasible vectors
// per case; a feasible v is a random direction scaled into both balls).
func TestL1Oracle(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 1))
	for rep := 0; rep < 200; rep++ {
		p := 2 + rng.IntN(40)
		ws := NewWorkspace(p)
		for i := range ws.c {
			ws.c[i] = rng.NormFloat64()
			if rep%4 == 0 {
				ws.c[i] = math.Round(ws.c[i]) // ties
			}
		}
		s := 1 + rng.Float64()*(math.Sqrt(float64(p))-1)
		val, ok := ws.l1Step(s)
		if !ok {
			continue
		}
		var n1, n2, dot float64
		for i, v := range ws.u {
			n1 += math.Abs(v)
			n2 += v * v
			dot += v * ws.c[i]
		}
		if n1 > s*(1+1e-9) || n2 > 1+1e-9 {
			t.Fatalf("case %d: u infeasible: ‖u‖₁ = %g (s = %g), ‖u‖₂² = %g", rep, n1, s, n2)
		}
		if !scalar.EqualWithinAbsOrRel(val, dot, 1e-9, 1e-9) {
			t.Fatalf("case %d: reported value %g, ⟨c,u⟩ = %g", rep, val, dot)
		}
		var cn1, cn2 float64
		for _, v := range ws.c {
			cn1 += math.Abs(v)
			cn2 += v * v
		}
		if cn1 > s*math.Sqrt(cn2) && !scalar.EqualWithinAbsOrRel(n1, s, 1e-9, 1e-9) {
			t.Fatalf("case %d: ℓ1 bound active but ‖u‖₁ = %g ≠ s = %g", rep, n1, s)
		}
		v := make([]float64, p)
		for trial := 0; trial < 1000; trial++ {
			var a1, a2 float64
			for i := range v {
				v[i] = ws.c[i] + rng.NormFloat64()*rng.Float64()*2
				if rng.IntN(3) == 0 {
					v[i] = 0
				}
				a1 += math.Abs(v[i])
				a2 += v[i] * v[i]
			}
			if a2 == 0 {
				continue
			}
			sc := math.Min(1/math.Sqrt(a2), s/a1)
			var d float64
			for i := range v {
				d += sc * v[i] * ws.c[i]
			}
			if d > val*(1+1e-12)+1e-12 {
				t.Fatalf("case %d: feasible vector gives %.15g > oracle %.15g", rep, d, val)
			}
		}
	}
}

// TestEpsContinuation: with ε lowered in stages the reweighted solvers
// still end on an optimal support of their cardinality (λ*(card) of
// REFERENCE.md after the refit) on Pitprops.
func TestEpsContinuation(t *testing.T) {
	a := loadPitprops(t)
	x := make([]float64, 13)
	for _, sp := range []Sparsity{{Method: LogPen, Gamma: 0.3, Eps: 0.01}, {Method: ExpPen, Gamma: 0.5, Eps: 0.01}} {
		res, err := Solve(x, a, sp, &Options{Tol: 1e-10, EpsStages: 6}, nil)
		if err != nil {
			t.Fatal(err)
		}
		if res.Card < 2 || res.Card > 12 {
			t.Fatalf("%v: card %d", sp, res.Card)
		}
		want := lambdaStar[res.Card-1].value
		if !scalar.EqualWithinAbs(res.Variance, want, 1e-6) {
			t.Errorf("%v: card %d, xᵀAx = %.7f, λ*(%d) = %.6f", sp, res.Card, res.Variance, res.Card, want)
		}
	}
}

func TestSolveErrors(t *testing.T) {
	pit := loadPitprops(t)
	withEntry := func(i, j int, v float64) *mat.SymDense {
		a := mat.NewSymDense(13, nil)
		a.CopySym(pit)
		a.SetSym(i, j, v)
		return a
	}
	zero := mat.NewSymDense(5, nil)
	cases := []struct {
		name string
		a    *mat.SymDense
		sp   Sparsity
		want error
	}{
		{"k=0", pit, Sparsity{Method: L0, K: 0}, ErrSparsity},
		{"k>p", pit, Sparsity{Method: L0, K: 14}, ErrSparsity},
		{"s<1", pit, Sparsity{Method: L1, S: 0.99}, ErrSparsity},
		{"s>√p", pit, Sparsity{Method: L1, S: math.Sqrt(13) * 1.0001}, ErrSparsity},
		{"s NaN", pit, Sparsity{Method: L1, S: math.NaN()}, ErrSparsity},
		{"γ<0 l0pen", pit, Sparsity{Method: L0Pen, Gamma: -0.1}, ErrSparsity},
		{"γ<0 l1pen", pit, Sparsity{Method: L1Pen, Gamma: -0.1}, ErrSparsity},
		{"γ NaN", pit, Sparsity{Method: L1Pen, Gamma: math.NaN()}, ErrSparsity},
		{"γ<0 log", pit, Sparsity{Method: LogPen, Gamma: -1, Eps: 0.1}, ErrSparsity},
		{"ε=0 log", pit, Sparsity{Method: LogPen, Gamma: 0.1, Eps: 0}, ErrSparsity},
		{"ε<0 exp", pit, Sparsity{Method: ExpPen, Gamma: 0.1, Eps: -1}, ErrSparsity},
		{"unknown method", pit, Sparsity{Method: 99}, ErrSparsity},
		// (Ax)_i² ≤ A_ii·xᵀAx: γ ≥ max A_ii = 1 keeps nothing (testdata/CONGRADU_NOTES.md §3(iii)).
		{"l0pen γ=max A_ii", pit, Sparsity{Method: L0Pen, Gamma: 1}, ErrPenaltyTooHigh},
		{"l1sqrt γ=max √A_ii", pit, Sparsity{Method: L1PenSqrt, Gamma: 1}, ErrPenaltyTooHigh},
		{"zero matrix", zero, Sparsity{Method: L0, K: 2}, ErrZeroMatrix},
		{"zero matrix dense", zero, Sparsity{}, ErrZeroMatrix},
		{"NaN off diagonal", withEntry(2, 7, math.NaN()), Sparsity{Method: L0, K: 3}, ErrNotFinite},
		{"NaN diagonal", withEntry(4, 4, math.NaN()), Sparsity{Method: L0, K: 3}, ErrNotFinite},
		{"+Inf entry", withEntry(0, 12, math.Inf(1)), Sparsity{}, ErrNotFinite},
		{"negative variance", withEntry(3, 3, -0.5), Sparsity{Method: L0, K: 3}, ErrNotPSD},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := c.a.SymmetricDim()
			x := make([]float64, p)
			_, err := Solve(x, c.a, c.sp, nil, nil)
			if !errors.Is(err, c.want) {
				t.Fatalf("error %v, want %v", err, c.want)
			}
			for i, v := range x {
				if v != 0 {
					t.Fatalf("dst[%d] = %g written on error", i, v)
				}
			}
		})
	}
}

// TestDegenerate: matrices that are valid but awkward give finite loadings
// or an explicit empty component, never NaN.
func TestDegenerate(t *testing.T) {
	pit := loadPitprops(t)
	// Pitprops with a zero row and column inserted at index 4 (a stuck
	// channel): the modes are those of Pitprops with a zero loading there.
	a := mat.NewSymDense(14, nil)
	for i := 0; i < 13; i++ {
		for j := i; j < 13; j++ {
			ii, jj := i, j
			if ii >= 4 {
				ii++
			}
			if jj >= 4 {
				jj++
			}
			a.SetSym(ii, jj, pit.At(i, j))
		}
	}
	x := make([]float64, 14)
	for _, sp := range append(noSparsity(14), Sparsity{Method: L0, K: 5}, Sparsity{Method: L0Pen, Gamma: 0.3},
		Sparsity{Method: L1, S: 2}, Sparsity{Method: L1PenSqrt, Gamma: 0.5}, Sparsity{Method: LogPen, Gamma: 0.3, Eps: 0.1}) {
		res, err := Solve(x, a, sp, &Options{Tol: 1e-10}, nil)
		if err != nil {
			t.Fatalf("zero row, %v: %v", sp, err)
		}
		for i, v := range x {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("zero row, %v: x[%d] = %g", sp, i, v)
			}
		}
		if x[4] != 0 {
			t.Errorf("zero row, %v: loading %g on the zero channel", sp, x[4])
		}
		if sp.Method == L0 && sp.K == 5 && !scalar.EqualWithinAbs(res.Variance, 3.406155, 1e-6) {
			t.Errorf("zero row, l0:5: %.7f, want λ*(5) = 3.406155 (REFERENCE.md)", res.Variance)
		}
	}
	// A warm start that lies in the null space (only on the zero channel)
	// falls back to the cold start.
	w := make([]float64, 14)
	w[4] = 1
	res, err := Solve(x, a, Sparsity{Method: L0, K: 5}, &Options{Warm: w, Tol: 1e-10}, nil)
	if err != nil || !res.Cold || !scalar.EqualWithinAbs(res.Variance, 3.406155, 1e-6) {
		t.Errorf("null-space warm start: %+v, %v", res, err)
	}
	// The squared ℓ1 penalty has no a-priori bound: too large a γ gives an
	// explicit empty component (testdata/CONGRADU_NOTES.md §3(iv): x = 0 once γ ≳ 3 on Pitprops).
	for i := range x {
		x[i] = 1
	}
	res, err = Solve(x[:13], pit, Sparsity{Method: L1Pen, Gamma: 4}, nil, nil)
	if err != nil || !res.Empty || res.Card != 0 || res.Variance != 0 {
		t.Errorf("l1pen:4: %+v, %v; want an empty component", res, err)
	}
	for i, v := range x[:13] {
		if v != 0 {
			t.Errorf("empty component: x[%d] = %g", i, v)
		}
	}
	// Rank one: u uᵀ. Every method finds u's direction.
	u := []float64{0, 3, -4, 0, 0}
	r1 := mat.NewSymDense(5, nil)
	r1.SymOuterK(1, mat.NewDense(5, 1, u))
	y := make([]float64, 5)
	for _, sp := range []Sparsity{{}, {Method: L0, K: 2}, {Method: L1, S: 1.5}, {Method: L0Pen, Gamma: 1}, {Method: L1PenSqrt, Gamma: 0.5}} {
		res, err := Solve(y, r1, sp, nil, nil)
		if err != nil {
			t.Fatalf("rank one %v: %v", sp, err)
		}
		if !scalar.EqualWithinAbs(res.Variance, 25, 1e-9) || !scalar.EqualWithinAbs(y[2], 0.8, 1e-9) || !scalar.EqualWithinAbs(y[1], -0.6, 1e-9) {
			t.Errorf("rank one %v: %+v %v; want variance 25, x = (0, −0.6, 0.8, 0, 0)", sp, res, y)
		}
	}
}

// TestOutsideAssumptions: an indefinite matrix (not a covariance) and
// entries so large that products overflow give finite loadings or an
// error, never NaN and never a panic.
func TestOutsideAssumptions(t *testing.T) {
	// Eigenvalues 3 and −1 (hand derivation: [[1,2],[2,1]] has (1,±1)/√2).
	ind := mat.NewSymDense(3, []float64{1, 2, 0, 2, 1, 0, 0, 0, 0.5})
	huge := mat.NewSymDense(3, []float64{1e308, 1e308, 0, 1e308, 1e308, 0, 0, 0, 1})
	for _, a := range []*mat.SymDense{ind, huge} {
		x := make([]float64, 3)
		for _, sp := range append(noSparsity(3), Sparsity{Method: L0, K: 1}, Sparsity{Method: L0Pen, Gamma: 0.5},
			Sparsity{Method: L1PenSqrt, Gamma: 0.5}, Sparsity{Method: LogPen, Gamma: 0.5, Eps: 0.1}) {
			res, err := Solve(x, a, sp, nil, nil)
			if err != nil {
				if a == huge && errors.Is(err, ErrNotFinite) {
					continue
				}
				t.Errorf("%v: %v", sp, err)
				continue
			}
			for i, v := range x {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Errorf("%v: x[%d] = %g", sp, i, v)
				}
			}
			if math.IsNaN(res.Variance) || math.IsNaN(res.Objective) {
				t.Errorf("%v: %+v", sp, res)
			}
		}
		tr, _ := NewSet(3, Config{Count: 3})
		if err := tr.Refresh(a); err == nil {
			for j := 0; j < tr.Count(); j++ {
				if m := tr.Mode(j); math.IsNaN(m.AdjustedVariance) || math.IsNaN(m.Variance) {
					t.Errorf("set mode %d: %+v", j, m)
				}
			}
		} else if !errors.Is(err, ErrNotFinite) {
			t.Errorf("set: %v", err)
		}
	}
}

// TestSolveNoAlloc: with a workspace, Solve does not allocate.
func TestSolveNoAlloc(t *testing.T) {
	a := loadPitprops(t)
	x := make([]float64, 13)
	ws := NewWorkspace(13)
	for _, sp := range append(noSparsity(13), Sparsity{Method: L0, K: 4}, Sparsity{Method: L1, S: 2}, Sparsity{Method: LogPen, Gamma: 0.3, Eps: 0.1}) {
		opt := &Options{EpsStages: 3}
		if n := testing.AllocsPerRun(20, func() {
			if _, err := Solve(x, a, sp, opt, ws); err != nil {
				t.Fatal(err)
			}
		}); n != 0 {
			t.Errorf("%v: %v allocations per Solve", sp, n)
		}
	}
}

// FuzzSolve: any symmetric 4 × 4 matrix (entries from the fuzzer, including
// NaN, Inf, negative diagonals and indefinite matrices) and any method give
// an error or finite loadings — never a panic, never NaN — in Solve and in a
// Set (both deflations, warm and cold refreshes).
func FuzzSolve(f *testing.F) {
	f.Add(uint8(1), uint8(2), 1.0, 0.5, 0.2, 1.0, 0.3, 1.0, 0.0, 0.1, 0.0, 1.0, 0.3)
	f.Add(uint8(3), uint8(1), 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.5)
	f.Add(uint8(2), uint8(4), 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.5)
	f.Fuzz(func(t *testing.T, m, k uint8, a00, a01, a02, a11, a12, a22, a03, a13, a23, a33, par float64) {
		a := mat.NewSymDense(4, []float64{
			a00, a01, a02, a03,
			a01, a11, a12, a13,
			a02, a12, a22, a23,
			a03, a13, a23, a33,
		})
		sp := Sparsity{Method: Method(m % 8), K: 1 + int(k%4), S: 1 + math.Abs(math.Mod(par, 1)), Gamma: math.Abs(par), Eps: 0.01 + math.Abs(math.Mod(par, 1))}
		for _, d := range []Deflation{Projection, Schur} {
			tr, err := NewSet(4, Config{Sparsity: []Sparsity{sp}, Count: 3, Deflation: d, MaxIter: 200, ColdEvery: 1})
			if err != nil {
				break
			}
			for rep := 0; rep < 2; rep++ {
				if tr.Refresh(a) != nil {
					break
				}
				for j := 0; j < tr.Count(); j++ {
					md := tr.Mode(j)
					if math.IsNaN(md.Variance) || math.IsNaN(md.AdjustedVariance) || math.IsNaN(md.DeflatedVariance) {
						t.Fatalf("%v %v mode %d: %+v", sp, d, j, md)
					}
					for _, v := range md.Loadings {
						if math.IsNaN(v) || math.IsInf(v, 0) {
							t.Fatalf("%v %v mode %d: loading %g", sp, d, j, v)
						}
					}
				}
			}
		}
		x := make([]float64, 4)
		res, err := Solve(x, a, sp, &Options{MaxIter: 200}, nil)
		if err != nil {
			return
		}
		for i, v := range x {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("%v on %v: x[%d] = %g", sp, a, i, v)
			}
		}
		if math.IsNaN(res.Variance) {
			t.Fatalf("%v: NaN variance", sp)
		}
	})
}
