package tracker

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/limits"
	"modewatch/tracker/modes"
)

// TestWilsonHilferty: the cube-root normal approximation against gonum's
// χ² quantile (distuv), within 2 % at the upper 1 % and 0.1 % for ν ≥ 3.
func TestWilsonHilferty(t *testing.T) {
	for _, alpha := range []float64{0.01, 0.001} {
		z := limits.Normal(1 - alpha)
		for _, nu := range []float64{3, 5, 10, 30, 100, 400} {
			want := limits.ChiSquare(1-alpha, nu)
			if got := wilsonHilferty(nu, z); !scalar.EqualWithinRel(got, want, 0.02) {
				t.Errorf("α %g, ν %g: %.4f, gonum %.4f", alpha, nu, got, want)
			}
		}
	}
}

// relationPlant draws frames of an invented 12-channel plant: nine loose
// channels driven by three independent factors (noise sd 0.5) and three
// channels each tied to two loose ones by a tight linear relation (noise
// sd 0.05): ch9 = ch0 + ch1, ch10 = ch3 − ch4, ch11 = ch6 + 0.5·ch7.
type relationPlant struct {
	rng *rand.Rand
	f   [3]float64
}

// maskedRelationPlant returns the plant seeded by (s1, s2), a frame
// buffer for its 12 channels and a mask with the given channels set.
func maskedRelationPlant(s1, s2 uint64, masked ...int) (*relationPlant, []float64, []bool) {
	x, mask := make([]float64, 12), make([]bool, 12)
	for _, k := range masked {
		mask[k] = true
	}
	return &relationPlant{rng: rand.New(rand.NewPCG(s1, s2))}, x, mask
}

// relations lists the sensors of each planted relation.
var relations = [3][]int{{0, 1, 9}, {3, 4, 10}, {6, 7, 11}}

func (rp *relationPlant) frame(x []float64) []float64 {
	for k := range rp.f {
		rp.f[k] = rp.rng.NormFloat64()
	}
	f := rp.f
	load := [9][3]float64{{1, 0.5, 0}, {0.8, 0, 0.3}, {0.5, 0.5, 0.5}, {0, 1, 0.2}, {0.3, 0.9, 0}, {0, 0.4, 0.8},
		{0.2, 0, 1}, {0.6, 0.3, 0.3}, {0, 0.7, 0.7}}
	for i := 0; i < 9; i++ {
		x[i] = load[i][0]*f[0] + load[i][1]*f[1] + load[i][2]*f[2] + 0.5*rp.rng.NormFloat64()
	}
	x[9] = x[0] + x[1] + 0.05*rp.rng.NormFloat64()
	x[10] = x[3] - x[4] + 0.05*rp.rng.NormFloat64()
	x[11] = x[6] + 0.5*x[7] + 0.05*rp.rng.NormFloat64()
	return x
}

// fitRelationPlant returns a tracker fitted on n frames of the plant with
// the residual and variance statistics on.
func fitRelationPlant(t *testing.T, rp *relationPlant, n int) *Tracker {
	t.Helper()
	tr, err := New(12, Config{Period: time.Second, Residual: true, Variance: true, RankResidual: true})
	if err != nil {
		t.Fatal(err)
	}
	frames := make([][]float64, n)
	for k := range frames {
		frames[k] = rp.frame(make([]float64, 12))
	}
	if err := tr.Fit(frames); err != nil {
		t.Fatal(err)
	}
	return tr
}

// q99 is the empirical 99 % quantile (k-th largest, k = ⌊0.01·n⌋ + 1).
func q99(v []float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	return s[len(s)-(len(s)/100+1)]
}

// brokenRelation scores m frames of rp with relation 1 broken (+0.3 on
// channel 9: six of its noise standard deviations) into sc by score
// (Step or Evaluate), calls each after every frame, and returns the
// number of frames whose SPE is over speLim. A scoring error ends the
// test.
func brokenRelation(t *testing.T, rp *relationPlant, score func(*Score, []float64, []bool) error, sc *Score, m int, speLim float64, each func()) int {
	t.Helper()
	x := make([]float64, 12)
	over := 0
	for k := 0; k < m; k++ {
		rp.frame(x)
		x[9] += 0.3
		if err := score(sc, x, nil); err != nil {
			t.Fatal(err)
		}
		if sc.SPE > speLim {
			over++
		}
		each()
	}
	return over
}

// TestResidualSeesBrokenRelation: breaking one tight relation by 6 of its
// own noise standard deviations (+0.3 on ch9, whose total sd is about 1.6)
// is seen by the residual Mahalanobis statistic in most frames, and its
// top RBC names a sensor of that relation, while SPE, with its limit set
// at the same empirical false-alert rate (the 99 % quantile over normal
// frames), stays under it in most frames; with RankResidual the ranked
// contributors follow R's RBC in the frames where R is further over its
// limit than φ. In control R has the mean of
// its χ²(p − r) law within 10 % (the derivation in resStat): ε_R = 10⁻⁴
// shrinks each tight direction, whose conditional variance is about
// 8·10⁻⁴ in standardized units, to about 0.89 of its weight (derived),
// so the mean is about 9 − 3·0.11 = 8.7.
func TestResidualSeesBrokenRelation(t *testing.T) {
	rp := &relationPlant{rng: rand.New(rand.NewPCG(13, 1))}
	tr := fitRelationPlant(t, rp, 20000)
	const n = 5000
	var sc Score
	x := make([]float64, 12)
	speN, resN := make([]float64, n), make([]float64, n)
	meanR := 0.0
	for k := 0; k < n; k++ {
		if err := tr.Step(&sc, rp.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		speN[k], resN[k] = sc.SPE, sc.Residual
		meanR += sc.Residual / n
	}
	dims := tr.ResidualDims()
	if !scalar.EqualWithinRel(meanR, float64(dims), 0.10) {
		t.Errorf("in control: mean R %.3f, χ²(%d) mean %d", meanR, dims, dims)
	}
	speLim, resLim := q99(speN), q99(resN)
	rbc := make([]float64, 12)
	overR, named := 0, 0
	const m = 2000
	overSPE := brokenRelation(t, rp, tr.Step, &sc, m, speLim, func() {
		if sc.Residual > resLim {
			overR++
			tr.ResidualContributionsTo(rbc)
			if slices.Contains(relations[0], argmax(rbc)) {
				named++
			}
			// RankResidual: the ranked contributors follow R's RBC.
			if sc.Residual/sc.ResidualLimit > sc.Phi/sc.PhiLimit && sc.Contrib[0].Channel != argmax(rbc) {
				t.Errorf("top contributor %d, top RBC of R %d", sc.Contrib[0].Channel, argmax(rbc))
			}
		}
	})
	t.Logf("broken relation: R over its 99%% quantile in %d of %d frames (named %d), SPE in %d; %d residual dims",
		overR, m, named, overSPE, dims)
	if overR < m*8/10 {
		t.Errorf("R over its limit in %d of %d faulty frames, want ≥ 80 %%", overR, m)
	}
	if named < overR*9/10 {
		t.Errorf("top RBC of R in the broken relation in %d of %d alarmed frames", named, overR)
	}
	if overSPE > m/5 {
		t.Errorf("SPE over its limit in %d of %d faulty frames, want it mostly under (≤ 20 %%)", overSPE, m)
	}
}

// TestVarianceSeesNoise: the noise of ch2 grows ×3 (sd 0.5 → 1.5); the
// variance statistic exceeds its limit and names ch2 within 100 frames,
// and in control exceeds its limit in under 2 % of frames (its limit is
// set at α = 1 % over 12 channels for independent frames).
func TestVarianceSeesNoise(t *testing.T) {
	rp := &relationPlant{rng: rand.New(rand.NewPCG(17, 1))}
	tr := fitRelationPlant(t, rp, 20000)
	var sc Score
	x := make([]float64, 12)
	over := 0
	const n = 5000
	for k := 0; k < n; k++ {
		if err := tr.Step(&sc, rp.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		if sc.Variance > sc.VarianceLimit {
			over++
		}
	}
	if over > n/50 {
		t.Errorf("in control: variance statistic over its limit in %d of %d frames", over, n)
	}
	first := -1
	for k := 0; k < 300; k++ {
		rp.frame(x)
		x[2] += math.Sqrt(8) * 0.5 * rp.rng.NormFloat64() // noise sd 0.5 → √(0.5² + 8·0.5²) = 1.5
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		if sc.Variance > sc.VarianceLimit && first < 0 {
			first = k
			if sc.VarianceChannel != 2 {
				t.Errorf("variance statistic names channel %d, want 2", sc.VarianceChannel)
			}
		}
	}
	t.Logf("variance statistic: over its limit in %d of %d normal frames; ×3 noise seen after %d frames", over, n, first)
	if first < 0 || first > 100 {
		t.Errorf("×3 noise on ch2 seen after %d frames, want ≤ 100", first)
	}
}

// TestResidualStepAllocs: with the residual, variance and relation
// statistics on, Step allocates nothing
// once the model exists (also across refreshes and with a missing channel).
func TestResidualStepAllocs(t *testing.T) {
	rp := &relationPlant{rng: rand.New(rand.NewPCG(19, 1))}
	tr, err := New(12, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 50, RefreshEvery: 10, Residual: true, Variance: true, Relations: 3})
	if err != nil {
		t.Fatal(err)
	}
	var sc Score
	x := make([]float64, 12)
	miss := make([]bool, 12)
	for k := 0; k < 200; k++ {
		miss[5] = k%3 == 0
		if err := tr.Step(&sc, rp.frame(x), miss); err != nil {
			t.Fatal(err)
		}
	}
	k := 0
	if a := testing.AllocsPerRun(100, func() {
		k++
		miss[5] = k%3 == 0
		_ = tr.Step(&sc, rp.frame(x), miss)
	}); a != 0 {
		t.Errorf("Step allocates %v per frame", a)
	}
	if !(sc.ResidualLimit > 0) || !(sc.VarianceLimit > 0) {
		t.Errorf("limits R %v, V %v", sc.ResidualLimit, sc.VarianceLimit)
	}
}

// blockCorrelation is a p-channel correlation matrix of p/k blocks of k
// channels, correlation rho inside a block and 0 across blocks.
func blockCorrelation(p, k int, rho float64) *mat.SymDense {
	a := mat.NewSymDense(p, nil)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			switch {
			case i == j:
				a.SetSym(i, j, 1)
			case i/k == j/k:
				a.SetSym(i, j, rho)
			}
		}
	}
	return a
}

// TestResidualAlwaysExists: a 9-channel unit of three 3-channel groups
// with 3-sparse modes and the automatic count. Asking for the whole
// variance (share 1) used to give nine modes that span the unit, an empty
// residual and SPE limit +Inf; the residual minimum now stops at eight.
// With Kaiser's rule (MinAdjusted 1) the count
// is three, one per group (eigenvalues 1 + 2·0.8 = 2.6 per group, the
// within-group ones 0.2). In both cases SPE has a finite limit and sees a
// sensor that leaves its group (+4σ on channel 4, 4 ≥ 3·2 standard
// deviations of the within-group residual: common practice).
func TestResidualAlwaysExists(t *testing.T) {
	const p = 9
	for _, c := range []struct {
		name    string
		mc      modes.Config
		r, dims int
	}{
		{"share 1", modes.Config{Share: 1, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 3}}}, 8, 1},
		{"Kaiser, l0:3", modes.Config{MinAdjusted: 1, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 3}}}, 3, 6},
	} {
		t.Run(c.name, func(t *testing.T) {
			tr, err := New(p, Config{Period: time.Second, HalfLife: 0, WarmUp: 500, RefreshEvery: 100, Modes: c.mc})
			if err != nil {
				t.Fatal(err)
			}
			src := newGaussSource(5, blockCorrelation(p, 3, 0.8))
			sc, x := stepThrough(t, tr, src, p, 2000)
			if sc.Modes != c.r || tr.ResidualDims() != c.dims {
				t.Errorf("%d modes, %d residual dimensions; want %d and %d", sc.Modes, tr.ResidualDims(), c.r, c.dims)
			}
			if math.IsInf(sc.SPELimit, 0) || !(sc.SPELimit > 0) {
				t.Fatalf("SPE limit %v, want finite and positive", sc.SPELimit)
			}
			src.frame(x)
			x[4] += 4 * src.sd[4]
			if err := tr.Evaluate(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			if !(sc.SPE > sc.SPELimit) {
				t.Errorf("SPE %.2f under its limit %.2f after a +4σ step on one channel", sc.SPE, sc.SPELimit)
			}
		})
	}
}

// TestRelationModes: on the invented plant with three planted linear
// relations (relationPlant: ch9 = ch0 + ch1, ch10 = ch3 − ch4,
// ch11 = ch6 + 0.5·ch7, each to noise sd 0.05 against sd 0.5 on the loose
// channels), three 3-sparse relation modes recover each relation's
// sensors exactly. Breaking relation 1 (+0.3 on ch9, 6 noise sd) raises
// the relation statistic over its limit in most frames and names that
// relation, while SPE with its limit at the same false-alert rate (the
// 99 % quantile over 5000 normal frames, as for the relation statistic)
// stays under it in most.
func TestRelationModes(t *testing.T) {
	rp := &relationPlant{rng: rand.New(rand.NewPCG(23, 1))}
	tr, err := New(12, Config{Period: time.Second, Relations: 3})
	if err != nil {
		t.Fatal(err)
	}
	frames := make([][]float64, 20000)
	for k := range frames {
		frames[k] = rp.frame(make([]float64, 12))
	}
	if err := tr.Fit(frames); err != nil {
		t.Fatal(err)
	}
	rel := tr.Relations()
	if len(rel) != 3 {
		t.Fatalf("%d relation modes, want 3", len(rel))
	}
	found := map[int]int{} // planted relation → relation mode
	for j, r := range rel {
		for k, want := range relations {
			if slices.Equal(r.Support, want) {
				found[k] = j
			}
		}
		t.Logf("relation mode %d: channels %v, loadings %.3f, variance %.2e", j, r.Support, r.Loadings, r.Variance)
	}
	if len(found) != 3 {
		t.Fatalf("recovered %d of the 3 planted relations", len(found))
	}
	const n = 5000
	var sc Score
	x := make([]float64, 12)
	speN, relN := make([]float64, n), make([]float64, n)
	for k := 0; k < n; k++ {
		if err := tr.Evaluate(&sc, rp.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		speN[k], relN[k] = sc.SPE, sc.Relation
	}
	speLim, relLim := q99(speN), q99(relN)
	t.Logf("limits: relation χ² %.2f (99 %% quantile %.2f), SPE 99 %% quantile %.2f", sc.RelationLimit, relLim, speLim)
	over, named := 0, 0
	const m = 2000
	overSPE := brokenRelation(t, rp, tr.Evaluate, &sc, m, speLim, func() {
		if sc.Relation > relLim {
			over++
			if sc.RelationMode == found[0] {
				named++
			}
		}
	})
	t.Logf("broken relation 1: relation statistic over in %d of %d frames (named %d), SPE over in %d", over, m, named, overSPE)
	if over < m*8/10 || named < over*95/100 {
		t.Errorf("relation statistic over its limit in %d of %d faulty frames, naming the broken relation in %d", over, m, named)
	}
	if overSPE > m/5 {
		t.Errorf("SPE over its limit in %d of %d faulty frames, want ≤ 20 %%", overSPE, m)
	}
}
