package tracker

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
)

// TestBIPRatio checks the Bayesian combination against closed forms. With
// h = 2 the χ² upper tail is e^(−x/2) (a textbook identity), so with
// q = −2 ln α a state's tail is α^ρ and the combined ratio is
// ρ* = ln(Σₖ πₖ α^ρₖ) / ln α (hand derivation from BIPRatio's formula).
func TestBIPRatio(t *testing.T) {
	const alpha = 0.01
	for _, c := range []struct {
		name   string
		states []StateTail
		h      float64
		want   float64
	}{
		{"one state, h 2: its own ratio", []StateTail{{1, 1.7, 2}}, 2, 1.7},
		{"one state, h 5: its own ratio", []StateTail{{1, 0.4, 5}}, 5, 0.4},
		{"one state at its limit, h 12", []StateTail{{0.3, 1, 12}}, 12, 1},
		{"two states, the same ratio", []StateTail{{0.6, 1.3, 2}, {0.4, 1.3, 2}}, 2, 1.3},
		{"two states, h 2, even posteriors", []StateTail{{0.5, 2, 2}, {0.5, 0.5, 2}}, 2,
			math.Log(0.5*(math.Pow(alpha, 2)+math.Pow(alpha, 0.5))) / math.Log(alpha)},
		{"two states, h 2, 0.9 / 0.1", []StateTail{{0.9, 1.5, 2}, {0.1, 3, 2}}, 2,
			math.Log(0.9*math.Pow(alpha, 1.5)+0.1*math.Pow(alpha, 3)) / math.Log(alpha)},
		{"posteriors renormalised", []StateTail{{0.25, 2, 2}, {0.25, 0.5, 2}}, 2,
			math.Log(0.5*(math.Pow(alpha, 2)+math.Pow(alpha, 0.5))) / math.Log(alpha)},
		{"a state without posterior is left out", []StateTail{{1, 0.8, 3}, {0, 9, 3}}, 3, 0.8},
		{"underflow: the most probable state's ratio", []StateTail{{0.7, 400, 2}, {0.3, 500, 2}}, 2, 400},
	} {
		t.Run(c.name, func(t *testing.T) {
			if got := BIPRatio(c.states, c.h, NewChiQuantiles(alpha, 16)); !scalar.EqualWithinAbsOrRel(got, c.want, 1e-9, 1e-9) {
				t.Errorf("BIPRatio = %.12g, want %.12g", got, c.want)
			}
		})
	}
	if got := BIPRatio([]StateTail{{0, 1, 2}}, 2, NewChiQuantiles(alpha, 0)); !math.IsNaN(got) {
		t.Errorf("no usable state: %v, want NaN", got)
	}
	// An alarm exactly when BIP > 1 − α: a frame over the limit in the
	// probable state but well inside the other is over when the first
	// all but holds the posterior, and within when the other has a share
	// (h = 4 both: tails 0.00094 and 0.616 by the χ²(4) survival
	// e^(−x/2)(1 + x/2), so 5 % of posterior in the other state already
	// puts 0.031 > α in the tail).
	if r := BIPRatio([]StateTail{{0.999, 1.4, 4}, {0.001, 0.2, 4}}, 4, NewChiQuantiles(alpha, 8)); !(r > 1) {
		t.Errorf("probable state over its limit: ρ* %v, want > 1", r)
	}
	if r := BIPRatio([]StateTail{{0.95, 1.4, 4}, {0.05, 0.2, 4}}, 4, &ChiQuantiles{alpha: alpha}); !(r < 1) {
		t.Errorf("5 %% posterior in a state well inside: ρ* %v, want < 1", r)
	}
}

// TestPosteriorTo: the posteriors sum to 1, the largest is Classify's
// component, and for two equal-covariance components they follow the
// logistic form P(C₁|x) = 1 / (1 + (π₂/π₁) exp(−(x−μ₂)²/2 + (x−μ₁)²/2))
// (one dimension, unit variance; hand derivation).
func TestPosteriorTo(t *testing.T) {
	m := &Mixture{D: 1, Weight: []float64{0.7, 0.3}, Mean: [][]float64{{0}, {3}},
		InvChol: [][]float64{{1}, {1}}}
	m.LogNorm = []float64{math.Log(0.7) - 0.5*math.Log(2*math.Pi), math.Log(0.3) - 0.5*math.Log(2*math.Pi)}
	post := make([]float64, 2)
	for _, x := range []float64{-2, 0, 1.2, 1.5, 2, 5, 40} {
		m.PosteriorTo(post, []float64{x})
		want := 1 / (1 + 0.3/0.7*math.Exp(-(x-3)*(x-3)/2+x*x/2))
		if !scalar.EqualWithinAbsOrRel(post[0], want, 1e-12, 1e-12) || !scalar.EqualWithinAbs(post[0]+post[1], 1, 1e-12) {
			t.Errorf("x %g: posteriors %v, want %g for the first", x, post, want)
		}
		if k := m.Classify([]float64{x}); post[k] < post[1-k] {
			t.Errorf("x %g: Classify %d, posteriors %v", x, k, post)
		}
	}
	if a := testing.AllocsPerRun(100, func() { m.PosteriorTo(post, []float64{1}) }); a > 1 {
		t.Errorf("PosteriorTo allocates %v times", a)
	}
}
