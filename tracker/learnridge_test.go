package tracker

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// TestLearnRidgeSameAsOwnFactor: masked learning under LearnRidgeResidual
// (residual statistic on, Ridge at its default) learns exactly what a
// tracker without the residual statistic learns with Ridge = ResidualRidge
// from its own factor of A + ε_R·I (scores, limits, learning weights and the
// EW covariance, bit for bit: the same cholUpper factor and the same
// arithmetic on it), and never factors A + εI itself; under
// LearnRidgeMissing it learns exactly what a tracker without the residual
// statistic learns with the default Ridge. The two rules differ on this
// plant (channel 9 is held to 0.05 of a unit by a relation), so the
// comparisons are not vacuous.
func TestLearnRidgeSameAsOwnFactor(t *testing.T) {
	const p = 12
	var trs [4]*Tracker
	newTrackers(t, trs[:], p, func(k int, c *Config) {
		c.Residual = k%2 == 0
		switch k {
		case 1:
			c.Ridge = DefaultResidualRidge
		case 2:
			c.LearnRidge = LearnRidgeMissing
		}
	})
	rp, x, mask := maskedRelationPlant(31, 5, 2, 9)
	var sc [4]Score
	learned := 0
	for f := 0; f < 500; f++ {
		rp.frame(x)
		var m []bool
		if f >= 120 {
			m = mask
			x[2] += 2 // a bias on a masked channel, not to be learned
		}
		for k, tr := range trs {
			if err := tr.StepMasked(&sc[k], x, nil, m); err != nil {
				t.Fatal(err)
			}
		}
		for _, pair := range [][2]int{{0, 1}, {2, 3}} {
			a, b := &sc[pair[0]], &sc[pair[1]]
			if a.T2 != b.T2 || a.SPE != b.SPE || a.Phi != b.Phi || a.PhiLimit != b.PhiLimit ||
				a.T2Limit != b.T2Limit || a.SPELimit != b.SPELimit || a.LearnWeight != b.LearnWeight {
				t.Fatalf("frame %d: tracker %d T² %v SPE %v φ %v w %v, tracker %d T² %v SPE %v φ %v w %v", f,
					pair[0], a.T2, a.SPE, a.Phi, a.LearnWeight, pair[1], b.T2, b.SPE, b.Phi, b.LearnWeight)
			}
		}
		if m != nil && sc[0].Ready && sc[0].LearnWeight > 0 {
			learned++
		}
	}
	if learned < 300 {
		t.Fatalf("%d masked frames learned", learned)
	}
	for _, tr := range trs {
		tr.ew.Flush()
	}
	cov := func(k int) []float64 { return trs[k].ew.cov.Data }
	for _, pair := range [][2]int{{0, 1}, {2, 3}} {
		for i, v := range cov(pair[0]) {
			if w := cov(pair[1])[i]; v != w {
				t.Fatalf("covariance entry %d: tracker %d %v, tracker %d %v", i, pair[0], v, pair[1], w)
			}
		}
	}
	diff := 0.0
	for i, v := range cov(0) {
		diff = math.Max(diff, math.Abs(v-cov(2)[i]))
	}
	if diff == 0 {
		t.Error("the two learning ridges learned the same covariance: the test cannot tell them apart")
	}
	if m := trs[0].mdl; m.own != nil || m.learn.slots == nil {
		t.Errorf("LearnRidgeResidual: own factor allocated %v, learning slots allocated %v", m.own != nil, m.learn.slots != nil)
	}
	if m := trs[2].mdl; m.own == nil || m.learn.slots != nil {
		t.Errorf("LearnRidgeMissing: own factor allocated %v, learning slots allocated %v", m.own != nil, m.learn.slots != nil)
	}
}

// TestLearnPatternAgainstGonum: the reconstruction learnPattern builds on
// the residual statistic's factor is the conditional expectation and
// covariance under A + ε_R·I, computed independently with gonum's
// mat.Cholesky on the observed block (reference library):
//
//	H_{m,o} = A_mo (A_oo + ε_R·I)⁻¹,  K = A_mm − A_mo (A_oo + ε_R·I)⁻¹ A_om
//
// to 1e-9 (relative to the entries' scale), with H zero on the masked
// columns.
func TestLearnPatternAgainstGonum(t *testing.T) {
	const p = 12
	var trs [1]*Tracker
	newTrackers(t, trs[:], p, func(_ int, c *Config) { c.Residual = true })
	tr := trs[0]
	rp := &relationPlant{rng: rand.New(rand.NewPCG(37, 2))}
	x := make([]float64, p)
	var sc Score
	for f := 0; f < 200; f++ {
		if err := tr.Step(&sc, rp.frame(x), nil); err != nil {
			t.Fatal(err)
		}
	}
	for _, miss := range [][]int{{9}, {2, 9}, {0, 1, 6, 11}} {
		pt, err := tr.learnPattern(miss)
		if err != nil {
			t.Fatal(err)
		}
		if tr.mdl.learn.n == 0 {
			t.Fatal("the pattern did not come from the residual statistic's factor")
		}
		a := tr.mdl.a
		var obs []int
		for i := 0; i < p; i++ {
			if !slices.Contains(miss, i) {
				obs = append(obs, i)
			}
		}
		no, k := len(obs), len(miss)
		soo := mat.NewSymDense(no, nil)
		for x, i := range obs {
			for y := x; y < no; y++ {
				v := a.At(i, obs[y])
				if x == y {
					v += DefaultResidualRidge
				}
				soo.SetSym(x, y, v)
			}
		}
		aom := mat.NewDense(no, k, nil)
		for x, i := range obs {
			for y, j := range miss {
				aom.Set(x, y, a.At(i, j))
			}
		}
		var ch mat.Cholesky
		if !ch.Factorize(soo) {
			t.Fatal("A_oo + ε_R I not positive definite")
		}
		var sol mat.Dense // (A_oo + ε_R I)⁻¹ A_om
		if err := ch.SolveTo(&sol, aom); err != nil {
			t.Fatal(err)
		}
		worst := 0.0
		for y := range miss {
			for x, i := range obs {
				want := sol.At(x, y)
				worst = math.Max(worst, math.Abs(pt.h[y*p+i]-want)/math.Max(1, math.Abs(want)))
			}
			for _, j := range miss {
				if pt.h[y*p+j] != 0 {
					t.Errorf("miss %v: H[%d, %d] = %v on a masked column", miss, y, j, pt.h[y*p+j])
				}
			}
			for z, j := range miss {
				want := a.At(miss[y], j)
				for x, i := range obs {
					want -= a.At(miss[y], i) * sol.At(x, z)
				}
				worst = math.Max(worst, math.Abs(pt.kc[y*k+z]-want)/math.Max(1, math.Abs(want)))
			}
		}
		if worst > 1e-9 {
			t.Errorf("miss %v: H and K differ from gonum's by %g", miss, worst)
		}
	}
}

// TestStepMaskedResidualAllocs: with the residual statistic on, masked
// learning on its factor allocates nothing per frame after the first
// masked frame (which allocates the learning slots once), through 25
// refreshes that rebuild the pattern, and forms no factor of its own.
func TestStepMaskedResidualAllocs(t *testing.T) {
	const p = 30
	tr, src := newStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 80, RefreshEvery: 8, Batch: 4,
		Residual: true, Modes: modes.Config{Count: 4, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 6}}}})
	var sc Score
	xs := src.frames(64, p)
	for k := 0; k < 200; k++ {
		tr.Step(&sc, xs[k%64], nil)
	}
	mask := make([]bool, p)
	mask[2], mask[9], mask[17] = true, true, true
	sc.Missing = make([]int, 0, p)
	maskedMallocs(t, tr, &sc, xs, mask, "200 masked frames (25 refreshes) with the residual statistic")
	if tr.mdl.own != nil {
		t.Error("the missing-data model factored A + εI for masked learning")
	}
}
