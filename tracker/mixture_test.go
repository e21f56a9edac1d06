package tracker

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// TestAdjustedRand checks the index on the examples of the scikit-learn
// documentation of adjusted_rand_score (values from memory: 1, 0.57…, 0).
func TestAdjustedRand(t *testing.T) {
	if v := AdjustedRand([]int{0, 0, 1, 1}, []int{1, 1, 0, 0}); v != 1 {
		t.Errorf("relabelled: %v", v)
	}
	if v := AdjustedRand([]int{0, 0, 1, 2}, []int{0, 0, 1, 1}); !scalar.EqualWithinAbs(v, 4.0/7, 1e-12) {
		t.Errorf("split cluster: %v, want 4/7 = 0.5714", v)
	}
	if v := AdjustedRand([]int{0, 0, 0, 0}, []int{0, 1, 2, 3}); v != 0 {
		t.Errorf("all apart: %v", v)
	}
}

// TestMixtureFindsStates: on three well separated Gaussian states (seeded
// draws, full covariances), FitMixture chooses 3 components by BIC and
// its classification matches the states with an adjusted Rand index of at
// least 0.9; the per-point log-density equals the multivariate normal's
// computed with gonum's Cholesky (the reference library) plus the log
// weight: −½ D log 2π − ½ log det Σ − ½ (x−μ)ᵀΣ⁻¹(x−μ).
func TestMixtureFindsStates(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	means := [][]float64{{0, 0, 0}, {6, 1, -2}, {-3, 7, 4}}
	var x [][]float64
	var truth []int
	for k := 0; k < 1500; k++ {
		s := rng.IntN(3)
		z1, z2, z3 := rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()
		p := []float64{means[s][0] + z1, means[s][1] + 0.5*z1 + 0.8*z2, means[s][2] + 0.3*z3 - 0.2*z1}
		x = append(x, p)
		truth = append(truth, s)
	}
	m, err := FitMixture(x, MixtureConfig{Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	if m.K() != 3 {
		t.Fatalf("BIC chose %d components, want 3", m.K())
	}
	got := make([]int, len(x))
	for i, p := range x {
		got[i] = m.Classify(p)
	}
	if ari := AdjustedRand(truth, got); ari < 0.9 {
		t.Errorf("adjusted Rand index %.3f, want ≥ 0.9", ari)
	}
	// Reference density: rebuild Σ = L Lᵀ from L⁻¹ and ask gonum.
	for j := 0; j < m.K(); j++ {
		var li, l mat.Dense
		li.CloneFrom(mat.NewDense(3, 3, m.InvChol[j]))
		if err := l.Inverse(&li); err != nil {
			t.Fatal(err)
		}
		var sigma mat.SymDense
		sigma.SymOuterK(1, &l)
		var ch mat.Cholesky
		if !ch.Factorize(&sigma) {
			t.Fatal("gonum: covariance not positive definite")
		}
		dx := mat.NewVecDense(3, nil)
		dx.SubVec(mat.NewVecDense(3, append([]float64(nil), x[0]...)), mat.NewVecDense(3, m.Mean[j]))
		var sol mat.VecDense
		if err := ch.SolveVecTo(&sol, dx); err != nil {
			t.Fatal(err)
		}
		want := math.Log(m.Weight[j]) - 1.5*math.Log(2*math.Pi) - 0.5*ch.LogDet() - 0.5*mat.Dot(dx, &sol)
		if got := m.logDensity(j, x[0]); !scalar.EqualWithinAbsOrRel(got, want, 1e-9, 1e-9) {
			t.Errorf("component %d: log density %v, gonum %v", j, got, want)
		}
	}
	if n := testing.AllocsPerRun(100, func() { m.Classify(x[7]) }); n != 0 {
		t.Errorf("Classify allocates %v", n)
	}
}
