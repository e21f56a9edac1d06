package tracker

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
)

// The residual statistic's factor and solves against gonum: factorLower's
// L equals gonum's Cholesky factor of A + ε_R·I, forward's y = L⁻¹z and
// ‖y‖² equal gonum's triangular solve and zᵀ(A + ε_R·I)⁻¹z, and diagOf's
// Ωᵢᵢ and Mᵢᵢ = Ωᵢᵢ − Dᵢᵢ equal the diagonal of gonum's Cholesky inverse
// (less the T² matrix's diagonal), at sizes below one group of four rows,
// with and without a partial group and across the diagonal block of
// diagOf (p = 3, 9, 64, 66, 203).
func TestResidualSolvesAgainstGonum(t *testing.T) {
	for _, p := range []int{3, 9, 64, 66, 203} {
		t.Run(fmt.Sprintf("p=%d", p), func(t *testing.T) {
			rng := rand.New(rand.NewPCG(uint64(p), 53))
			s := randomCov(rng, p, min(5, p-1))
			m, _ := testModel(t, s, eigenLoadings(s, min(2, p-1)), IndexCombined)
			cfg := Config{Residual: true, ResidualRidge: DefaultResidualRidge, Alpha: 0.01, VarianceLambda: DefaultVarianceLambda}
			rs := newResStat(p, &cfg)
			rs.refresh(m, 0.01)
			if !rs.ok {
				t.Fatal("refresh failed")
			}
			g := &rs.gens[rs.cur]
			omega, ch := refPrecision(t, s, DefaultResidualRidge)
			var lref mat.TriDense
			ch.LTo(&lref)
			for i := 0; i < p; i++ {
				for j := 0; j <= i; j++ {
					approx(t, fmt.Sprintf("L[%d,%d]", i, j), g.l[i*p+j], lref.At(i, j), 1e-12, 1e-10)
				}
			}
			for trial := 0; trial < 3; trial++ {
				z := make([]float64, p)
				for i := range z {
					z[i] = rng.NormFloat64()
				}
				q := rs.forward(z)
				var y, oz mat.VecDense
				if err := y.SolveVec(&lref, mat.NewVecDense(p, z)); err != nil {
					t.Fatal(err)
				}
				for i := 0; i < p; i++ {
					approx(t, fmt.Sprintf("y[%d]", i), rs.zb[i], y.AtVec(i), 1e-10, 1e-9)
				}
				oz.MulVec(omega, mat.NewVecDense(p, z))
				approx(t, "zᵀΩz", q, mat.Dot(mat.NewVecDense(p, z), &oz), 1e-9, 1e-9)
			}
			rs.diagOf(g)
			for i := 0; i < p; i++ {
				approx(t, fmt.Sprintf("Ω[%d,%d]", i, i), g.omd[i], omega.At(i, i), 1e-9, 1e-9)
				approx(t, fmt.Sprintf("M[%d,%d]", i, i), g.mii[i], omega.At(i, i)-m.base.dd[i], 1e-9, 1e-9)
			}
		})
	}
}

// The RBC of R formed on demand equals the RBC formed with the frame's
// score: a tracker with the residual statistic alone (pending until read)
// against one with the variance statistic too (formed in every frame, as
// the variance statistic needs Ωz), frame by frame over refreshes; a third
// tracker read only at the frames whose learning refreshed the model (so
// the RBC comes from the factor the refresh replaced) and once more after
// two extra refreshes (the slot of the scoring factor then reused). The
// statistics are bit for bit the same in all three.
func TestResidualContributionsOnDemand(t *testing.T) {
	const p = 12
	var trs [3]*Tracker
	newTrackers(t, trs[:], p, func(k int, c *Config) { c.Residual, c.Variance = true, k == 1 })
	rp := &relationPlant{rng: rand.New(rand.NewPCG(23, 1))}
	x := make([]float64, p)
	var sc [3]Score
	var rbc [3][]float64
	for k := range rbc {
		rbc[k] = make([]float64, p)
	}
	checked, atRefresh := 0, 0
	for f := 0; f < 305; f++ {
		rp.frame(x)
		if f%50 == 0 {
			x[9] += 0.5 // break a relation now and then: R and its RBC move
		}
		for k, tr := range trs {
			if err := tr.Step(&sc[k], x, nil); err != nil {
				t.Fatal(err)
			}
		}
		if !sc[0].Ready {
			continue
		}
		for k := 1; k < 3; k++ {
			if sc[k].Residual != sc[0].Residual || sc[k].ResidualLimit != sc[0].ResidualLimit {
				t.Fatalf("frame %d: R %v/%v, tracker %d %v/%v", f, sc[0].Residual, sc[0].ResidualLimit, k, sc[k].Residual, sc[k].ResidualLimit)
			}
		}
		trs[0].ResidualContributionsTo(rbc[0])
		trs[1].ResidualContributionsTo(rbc[1])
		refreshed := sc[2].NextRefresh == 1 // this frame's learning refreshed the model
		if refreshed {
			trs[2].ResidualContributionsTo(rbc[2])
			atRefresh++
		}
		for i := 0; i < p; i++ {
			if rbc[0][i] != rbc[1][i] || (refreshed && rbc[2][i] != rbc[1][i]) {
				t.Fatalf("frame %d channel %d: RBC on demand %v, at refresh %v, with the score %v", f, i, rbc[0][i], rbc[2][i], rbc[1][i])
			}
		}
		checked++
	}
	if checked < 200 || atRefresh < 20 {
		t.Fatalf("checked %d frames, %d at a refresh", checked, atRefresh)
	}
	// One more frame, not read on the third tracker, then two refreshes
	// with frames learned without scoring before each (the correlation
	// moves): the second reuses the slot of the factor that scored the
	// frame, so its RBC is formed before.
	rp.frame(x)
	for k, tr := range trs {
		if err := tr.Step(&sc[k], x, nil); err != nil || sc[k].NextRefresh == 1 {
			t.Fatalf("last frame: %v, next refresh %d", err, sc[k].NextRefresh)
		}
	}
	trs[1].ResidualContributionsTo(rbc[1])
	for n := 0; n < 2; n++ {
		for f := 0; f < 20; f++ {
			rp.frame(x)
			x[10] += 1
			trs[2].Stats().Update(x, nil)
		}
		trs[2].Stats().Flush()
		if err := trs[2].Refresh(); err != nil {
			t.Fatal(err)
		}
	}
	trs[2].ResidualContributionsTo(rbc[2])
	nonzero := 0
	for i := 0; i < p; i++ {
		if rbc[2][i] != rbc[1][i] {
			t.Fatalf("after two refreshes, channel %d: RBC %v, with the score %v", i, rbc[2][i], rbc[1][i])
		}
		if rbc[1][i] > 0 && !math.IsInf(rbc[1][i], 0) {
			nonzero++
		}
	}
	if nonzero == 0 {
		t.Fatal("every RBC is zero")
	}
}

// One factorization for the residual statistic and the missing-data model
// when their ridges agree (model.shareFactor): a tracker with the residual
// statistic on and Ridge = ResidualRidge, whose missing-data model reads
// the residual statistic's factor, scores and learns frames with a masked
// pair and a channel missing every third frame exactly as one without the
// residual statistic, which factors A + εI itself (T², SPE, φ, limits,
// contributors, their expected values and bands, bit for bit); the factor
// is the same either way (cholUpper of the same matrix).
func TestSharedFactorSameScores(t *testing.T) {
	const p = 12
	var trs [2]*Tracker
	newTrackers(t, trs[:], p, func(k int, c *Config) {
		c.Residual, c.Ridge, c.ResidualRidge = k == 0, DefaultResidualRidge, DefaultResidualRidge
	})
	rp, x, mask := maskedRelationPlant(29, 1, 2, 5)
	miss := make([]bool, p)
	var sc [2]Score
	incomplete := 0
	for f := 0; f < 400; f++ {
		rp.frame(x)
		miss[7] = f%3 == 0
		var m []bool
		if f >= 100 {
			m = mask
		}
		for k, tr := range trs {
			if err := tr.StepMasked(&sc[k], x, miss, m); err != nil {
				t.Fatal(err)
			}
		}
		a, b := &sc[0], &sc[1]
		if !a.Ready {
			continue
		}
		if miss[7] || m != nil {
			incomplete++
		}
		same := a.T2 == b.T2 && a.SPE == b.SPE && a.Phi == b.Phi && a.T2Limit == b.T2Limit &&
			a.SPELimit == b.SPELimit && a.PhiLimit == b.PhiLimit && len(a.Contrib) == len(b.Contrib)
		for i := 0; same && i < len(a.Contrib); i++ {
			ca, cb := a.Contrib[i], b.Contrib[i]
			same = ca.Channel == cb.Channel && ca.RBC == cb.RBC && ca.Expected == cb.Expected && ca.Band == cb.Band
		}
		if !same {
			t.Fatalf("frame %d: shared factor T² %v SPE %v φ %v %+v, own factor T² %v SPE %v φ %v %+v",
				f, a.T2, a.SPE, a.Phi, a.Contrib, b.T2, b.SPE, b.Phi, b.Contrib)
		}
	}
	if incomplete < 300 {
		t.Fatalf("%d incomplete frames scored", incomplete)
	}
	if m := trs[0].mdl; len(m.chol) == 0 || &m.chol[0] != &trs[0].rs.factorU()[0] || m.own != nil {
		t.Fatal("the missing-data model does not use the residual statistic's factor")
	}
	if m := trs[1].mdl; m.own == nil || &m.chol[0] != &m.own[0] {
		t.Fatal("the tracker without the residual statistic does not factor A + εI itself")
	}
}

// newTrackers fills trs with trackers of p channels (one-second frames,
// one-hour half-life, warm-up 50, a refresh every 10 frames), tracker k's
// configuration then adjusted by set.
func newTrackers(t *testing.T, trs []*Tracker, p int, set func(k int, c *Config)) {
	t.Helper()
	for k := range trs {
		cfg := Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 50, RefreshEvery: 10}
		set(k, &cfg)
		tr, err := New(p, cfg)
		if err != nil {
			t.Fatal(err)
		}
		trs[k] = tr
	}
}
