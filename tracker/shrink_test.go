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
