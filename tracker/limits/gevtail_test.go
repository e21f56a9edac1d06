package limits

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestFitGumbelScore: the Gumbel fit to the Port Pirie maxima solves the
// likelihood equations of the Gumbel (Coles 2001, §3.3.2 with ξ = 0;
// derived): σ = x̄ − Σxᵢe^(−xᵢ/σ)/Σe^(−xᵢ/σ) and μ = −σ log(mean e^(−xᵢ/σ)),
// and its log-likelihood lies at most that of the free GEV fit.
func TestFitGumbelScore(t *testing.T) {
	x := portPirie(t)
	g, err := FitGumbel(x)
	if err != nil {
		t.Fatal(err)
	}
	if g.Xi != 0 {
		t.Fatalf("ξ = %v, want 0", g.Xi)
	}
	var mean, se, sxe float64
	for _, v := range x {
		mean += v / float64(len(x))
		e := math.Exp(-v / g.Sigma)
		se += e
		sxe += v * e
	}
	if want := mean - sxe/se; math.Abs(g.Sigma-want) > 1e-5 {
		t.Errorf("σ = %.6f, the likelihood equation gives %.6f", g.Sigma, want)
	}
	if want := -g.Sigma * math.Log(se/float64(len(x))); math.Abs(g.Mu-want) > 1e-5 {
		t.Errorf("μ = %.6f, the likelihood equation gives %.6f", g.Mu, want)
	}
	f, err := FitGEV(x)
	if err != nil {
		t.Fatal(err)
	}
	if g.LogLik > f.LogLik+1e-6 {
		t.Errorf("Gumbel log-likelihood %.6f above the free fit's %.6f", g.LogLik, f.LogLik)
	}
	if s := math.Sqrt(g.Cov[1][1]); !(s > 0) || g.Cov[2][2] != 0 {
		t.Errorf("covariance %v: want a positive σ variance and none for ξ", g.Cov)
	}
}

// TestFitGEVUnbounded: for maxima whose free fit has ξ̂ < 0 (Port Pirie,
// ξ̂ ≈ −0.05, Coles 2001, §3.4.1; block maxima of draws with the upper
// tail (1 − x)³ below an end point, whose limit has ξ = −1/3) the constrained fit is the Gumbel fit, and its return
// levels of small probability lie above the free fit's; for maxima with
// ξ̂ > 0 (of Pareto draws, ξ = 0.5) it is the free fit itself.
func TestFitGEVUnbounded(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	blockMax := func(draw func() float64) []float64 {
		m := make([]float64, 40)
		for b := range m {
			m[b] = math.Inf(-1)
			for range 200 {
				m[b] = math.Max(m[b], draw())
			}
		}
		return m
	}
	bounded := blockMax(func() float64 { return 1 - math.Pow(rng.Float64(), 1.0/3) })
	pareto := blockMax(func() float64 { return math.Pow(1-rng.Float64(), -0.5) })
	for _, c := range []struct {
		name string
		x    []float64
	}{{"Port Pirie", portPirie(t)}, {"bounded", bounded}} {
		free, err := FitGEV(c.x)
		if err != nil {
			t.Fatal(err)
		}
		if free.Xi >= 0 {
			t.Fatalf("%s: free ξ̂ = %v, the test needs one below 0", c.name, free.Xi)
		}
		got, err := FitGEVUnbounded(c.x)
		if err != nil {
			t.Fatal(err)
		}
		want, _ := FitGumbel(c.x)
		if got.GEV != want.GEV {
			t.Errorf("%s: constrained fit %+v, want the Gumbel fit %+v", c.name, got.GEV, want.GEV)
		}
		if zc, zf := got.ReturnLevel(0.01), free.ReturnLevel(0.01); !(zc > zf) {
			t.Errorf("%s: 100-block return level %.4f constrained, %.4f free: want the constrained one above", c.name, zc, zf)
		}
	}
	free, err := FitGEV(pareto)
	if err != nil {
		t.Fatal(err)
	}
	if free.Xi <= 0 {
		t.Fatalf("Pareto maxima: free ξ̂ = %v, the test needs one above 0", free.Xi)
	}
	got, err := FitGEVUnbounded(pareto)
	if err != nil {
		t.Fatal(err)
	}
	if got.GEV != free.GEV {
		t.Errorf("Pareto maxima: constrained fit %+v, want the free fit %+v", got.GEV, free.GEV)
	}
}
