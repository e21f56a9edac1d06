package tracker

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"modewatch/tracker/limits"
	"modewatch/tracker/modes"
)

// gaussSource draws frames x = mean + sd ⊙ (L g) with L the Cholesky factor
// of a correlation matrix, g standard normal (seeded).
type gaussSource struct {
	rng      *rand.Rand
	l        mat.TriDense
	lr       []float64 // L row-major
	mean, sd []float64
	g        []float64
}

func newGaussSource(seed uint64, corr *mat.SymDense) *gaussSource {
	p := corr.SymmetricDim()
	var ch mat.Cholesky
	if !ch.Factorize(corr) {
		panic("not SPD")
	}
	s := &gaussSource{rng: rand.New(rand.NewPCG(seed, seed+1)), mean: make([]float64, p), sd: make([]float64, p), g: make([]float64, p)}
	ch.LTo(&s.l)
	s.lr = make([]float64, p*p)
	for i := 0; i < p; i++ {
		for j := 0; j <= i; j++ {
			s.lr[i*p+j] = s.l.At(i, j)
		}
	}
	for i := 0; i < p; i++ {
		s.mean[i] = 100 * float64(i+1)
		s.sd[i] = 0.5 + float64(i%7)
	}
	return s
}

func (s *gaussSource) frame(dst []float64) []float64 {
	p := len(s.g)
	for i := range s.g {
		s.g[i] = s.rng.NormFloat64()
	}
	for i := 0; i < p; i++ {
		v := 0.0
		for j, l := range s.lr[i*p : i*p+i+1] {
			v += l * s.g[j]
		}
		dst[i] = s.mean[i] + s.sd[i]*v
	}
	return dst
}

func (s *gaussSource) frames(n, p int) [][]float64 {
	out := make([][]float64, n)
	for k := range out {
		out[k] = s.frame(make([]float64, p))
	}
	return out
}

// tepCorrelation is the correlation matrix of rows 21–500 of the Tennessee
// Eastman normal-operation run d00.dat (testdata/tep, 52 variables): the
// joint behaviour of a real process model, used as the known covariance of
// plant-like test frames.
func tepCorrelation(t testing.TB) *mat.SymDense {
	rows := loadTEP(t, "d00.dat")[20:500]
	x := mat.NewDense(len(rows), 52, nil)
	for i, r := range rows {
		x.SetRow(i, r)
	}
	c := mat.NewSymDense(52, nil)
	stat.CorrelationMatrix(c, x, nil)
	return c
}

// residualRoots returns the eigenvalues of the residual covariance
// R = C̃ S C̃ (C̃ = I − QQᵀ from the tracker's model) of frames with
// standardized covariance s, dropping the r null roots of span(Q) (gonum
// EigenSym as the reference).
func residualRoots(tr *Tracker, s *mat.SymDense) []float64 {
	m := tr.mdl
	p := m.p
	c := mat.NewDense(p, p, nil)
	for i := 0; i < p; i++ {
		for j := 0; j < p; j++ {
			v := 0.0
			for k := 0; k < m.rq; k++ {
				v -= m.q[i*m.maxR+k] * m.q[j*m.maxR+k]
			}
			if i == j {
				v++
			}
			c.Set(i, j, v)
		}
	}
	var cs, r mat.Dense
	cs.Mul(c, s)
	r.Mul(&cs, c)
	rs := mat.NewSymDense(p, nil)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			rs.SetSym(i, j, (r.At(i, j)+r.At(j, i))/2)
		}
	}
	var es mat.EigenSym
	es.Factorize(rs, false)
	return es.Values(nil)[m.rq:]
}

// False-alarm rate at α = 0.01 on 200,000 seeded in-control Gaussian frames
// with a known correlation: T² and SPE exceed their limits on 0.7–1.3 % of
// frames (a property of the limits: Montgomery, Introduction to Statistical
// Quality Control, ch. 11; Jackson & Mudholkar 1979). Each model is a
// baseline fitted on 50,000 frames (F-form T² with n_eff = 50,000, within
// 0.1 % of the χ² form; the F form is conservative for small n, see
// TestT2FFormConservative in package limits). Besides the band, every SPE rate is compared with the exact
// tail probability of Q = Σ λⱼzⱼ² at the limit used (Imhof 1961 over the
// residual roots of the fitted model under the true correlation): the rate
// must be within 0.12 % of it (binomial s.e. 0.022 %, plus the fit's error).
//
// Models:
//
//   - plant: the correlation of the Tennessee Eastman normal run (52
//     channels, testdata/tep) with the 11 dense modes of the published PCA
//     monitoring set-up. A real process's structure: 41 residual roots
//     spread without a single dominant one (largest 1.28, mean 0.58; Box's
//     h = θ₁²/θ₂ = 27 of 41). The default configuration (F-form T², Box
//     SPE) must hold the 0.7–1.3 % band here. Measured (seed 43): T²
//     0.99 %, SPE (Box) 1.13 % against an exact tail of 1.09 % at its
//     limit; with JM, SPE 1.04 % (exact 0.99 %).
//   - dominant root: a 20-channel, 3-factor random model with 3 modes whose
//     residual has one dominant root (0.56 against a mean of 0.17; h = 10.8
//     of 17), the hardest case for Box (1954). Box runs
//     high: measured 1.37 %, exact tail 1.40 %, outside the band; this is
//     asserted as its own band (1.25–1.5 %, and an exact tail ≥ 1.3 %),
//     showing why the Jackson–Mudholkar limit exists: JM holds the band
//     here (measured 0.81 %, exact 0.84 %). T² 0.97 % with the χ² and the F
//     form.
//
// φ is logged, not asserted (the band is for T² and SPE): 1.15 %
// (plant) and 1.26 % (dominant root).
func TestFalseAlarmRate(t *testing.T) {
	const nFit, n = 50000, 200000
	plant := tepCorrelation(t)
	dominant := randomCov(rand.New(rand.NewPCG(41, 42)), 20, 3)
	for _, c := range []struct {
		name         string
		corr         *mat.SymDense
		modes        int
		form         T2Form
		spe          SPEForm
		speLo, speHi float64 // band asserted for SPE
		t2Lo, t2Hi   float64
		exactLo      float64 // exact SPE tail at the limit must be ≥ this (0: unchecked)
	}{
		{"plant, default (F, Box)", plant, 11, T2F, SPEBox, 0.007, 0.013, 0.007, 0.013, 0},
		{"plant, JM", plant, 11, T2F, SPEJacksonMudholkar, 0.007, 0.013, 0.007, 0.013, 0},
		{"dominant root, Box", dominant, 3, T2ChiSquare, SPEBox, 0.0125, 0.015, 0.007, 0.013, 0.013},
		{"dominant root, JM", dominant, 3, T2F, SPEJacksonMudholkar, 0.007, 0.013, 0.007, 0.013, 0},
	} {
		t.Run(c.name, func(t *testing.T) {
			p := c.corr.SymmetricDim()
			src := newGaussSource(43, c.corr)
			tr, err := New(p, Config{Modes: modes.Config{Count: c.modes}, T2Limit: c.form, SPELimit: c.spe, FlatFrames: -1})
			if err != nil {
				t.Fatal(err)
			}
			if err := tr.Fit(src.frames(nFit, p)); err != nil {
				t.Fatal(err)
			}
			var sc Score
			x := make([]float64, p)
			var over exceed
			for k := 0; k < n; k++ {
				if err := tr.Evaluate(&sc, src.frame(x), nil); err != nil {
					t.Fatal(err)
				}
				over.add(&sc)
			}
			rates := [3]float64{float64(over[0]) / n, float64(over[1]) / n, float64(over[2]) / n}
			roots := residualRoots(tr, c.corr)
			th := limits.ThetaFromEigen(roots)
			_, h := limits.BoxParams(th)
			exact := imhofTail(sc.SPELimit, roots)
			t.Logf("%s: limits T² %.4f SPE %.4f φ %.4f; exceedances T² %.3f%% SPE %.3f%% (exact tail at this limit %.3f%%, Imhof) φ %.3f%%; residual roots: %d, largest %.3f, mean %.3f, Box h %.1f",
				c.name, sc.T2Limit, sc.SPELimit, sc.PhiLimit, 100*rates[0], 100*rates[1], 100*exact, 100*rates[2],
				len(roots), roots[len(roots)-1], th.T1/float64(len(roots)), h)
			if rates[0] < c.t2Lo || rates[0] > c.t2Hi {
				t.Errorf("T² false-alarm rate %.3f%% outside %.2f–%.2f %%", 100*rates[0], 100*c.t2Lo, 100*c.t2Hi)
			}
			if rates[1] < c.speLo || rates[1] > c.speHi {
				t.Errorf("SPE false-alarm rate %.3f%% outside %.2f–%.2f %%", 100*rates[1], 100*c.speLo, 100*c.speHi)
			}
			if math.Abs(rates[1]-exact) > 0.0012 {
				t.Errorf("SPE false-alarm rate %.3f%% differs from the exact tail %.3f%% at its limit", 100*rates[1], 100*exact)
			}
			if exact < c.exactLo {
				t.Errorf("exact SPE tail %.3f%% below %.2f%%: the model is not the hard case it is meant to be", 100*exact, 100*c.exactLo)
			}
		})
	}
}

// fiftyChannelModel: 5 latent factors, each loading on 10 channels with
// overlap, plus independent noise; returned as a correlation matrix. With
// skewed, a few channels dominate each factor and the noise is small (the
// situation where plain contributions smear: Westerhuis, Gurden & Smilde
// 2000).
func fiftyChannelModel(kind int) *mat.SymDense {
	const p = 50
	rng := rand.New(rand.NewPCG(51, 52))
	f := mat.NewDense(p, 5, nil)
	noise := make([]float64, p)
	skewed := kind == 1
	if kind == 3 {
		// 25 independent redundant pairs (correlation about 0.98).
		f = mat.NewDense(p, p/2, nil)
		for m := 0; m < p/2; m++ {
			f.Set(2*m, m, 1)
			f.Set(2*m+1, m, 1)
			noise[2*m], noise[2*m+1] = 0.02, 0.02
		}
	}
	if kind == 2 {
		// Redundant pairs: channels 2m and 2m+1 measure the same quantity
		// (gain g_m, small independent noise); each factor drives 5 pairs.
		for m := 0; m < p/2; m++ {
			g := 0.6 + 0.8*rng.Float64()
			for _, i := range []int{2 * m, 2*m + 1} {
				f.Set(i, m/5, g)
				noise[i] = 0.05
			}
		}
	}
	for i := 0; i < p && kind < 2; i++ {
		if skewed {
			u := rng.Float64()
			f.Set(i, i/10, 0.2+3*u*u*u)
			noise[i] = 0.02 + 0.1*rng.Float64()
		} else {
			f.Set(i, i/10, 0.8+0.4*rng.Float64())
			noise[i] = 0.3
		}
		if i%10 == 9 && i/10 < 4 {
			f.Set(i, i/10+1, 0.5)
		}
	}
	return factorCorrelation(f, noise)
}

// mixedSensorModel: 50 channels, k latent factors; channel i is a mixture
// of 1 to maxPer factors (random signed weights) plus sensor noise scaled so
// that the factors explain the share comm of its variance; returned as a
// correlation matrix (seeded).
func mixedSensorModel(k int, comm float64, maxPer int, seed uint64) *mat.SymDense {
	const p = 50
	rng := rand.New(rand.NewPCG(seed, 7))
	f := mat.NewDense(p, k, nil)
	noise := make([]float64, p)
	for i := 0; i < p; i++ {
		n := 1 + rng.IntN(maxPer)
		for a := 0; a < n; a++ {
			m := rng.IntN(k)
			f.Set(i, m, f.At(i, m)+rng.NormFloat64())
		}
		s := 0.0
		for _, v := range f.RawRowView(i) {
			s += v * v
		}
		noise[i] = s * (1 - comm) / comm
	}
	return factorCorrelation(f, noise)
}

// smearedChannels counts the channels j for which a pure bias on j gives
// some other channel a larger plain SPE contribution, |C̃ᵢⱼ| > C̃ⱼⱼ, with
// C̃ = I − VVᵀ from the r leading eigenvectors of corr (gonum EigenSym).
func smearedChannels(corr *mat.SymDense, r int) int {
	p := corr.SymmetricDim()
	v := eigenLoadings(corr, r)
	var vv mat.Dense
	vv.Mul(v, v.T())
	n := 0
	for j := 0; j < p; j++ {
		cjj := 1 - vv.At(j, j)
		for i := 0; i < p; i++ {
			if i != j && math.Abs(vv.At(i, j)) > cjj {
				n++
				break
			}
		}
	}
	return n
}

// A single-sensor bias of 3 standard deviations on a 50-channel correlated
// model where plain SPE contributions smear: RBC puts the faulty channel
// first in at least 95 % of seeded trials (Alcalá & Qin 2009), while plain
// SPE contributions, which smear (Westerhuis, Gurden & Smilde 2000), do so clearly less often. 2,000 trials per model, the faulty
// channel drawn uniformly.
//
// The smearing models ("mixed sensors"): 30 latent factors, each channel a
// mixture of 1–3 of them with 1 % sensor noise, 30 dense modes (the
// correlation-matrix analogue of the smearing example of TestSmearingExample:
// standardizing equalises a
// single factor's loadings, so the dominance comes from channels shared
// between factors, which the modes explain almost entirely: small C̃ⱼⱼ,
// large |C̃ᵢⱼ|). Seeds 17 and 19 were taken from a search over
// generator seeds for models with the most smearing channels (21 of 50
// under the population model); the search did not look at RBC. Measured:
//
//	seed 17: RBC(φ) 95.8 %, RBC(φ)/limit 96.9 %, RBC(SPE) 72.2 %, plain SPE 57.2 %
//	seed 19: RBC(φ) 97.2 %, RBC(φ)/limit 97.7 %, RBC(SPE) 73.6 %, plain SPE 56.1 %
//
// Asserted: RBC(φ) ≥ 95 %, plain ≤ 70 %, and at least 15 smearing channels.
// The RBC of SPE alone does not reach 95 % here: with 30 of 50 dimensions
// in the modes the residual space is too small to separate the channels,
// and the default index φ adds the T² part.
//
// Extra models, where plain contributions do not smear or smear for a
// structural reason: 0, five factors over overlapping groups of ten
// channels; 1, the same with a few dominant channels per factor and small
// noise; 2, five factors over five redundant sensor pairs each (all three:
// every method ≥ 95 %, asserted for RBC(φ)); 3, twenty-five independent
// redundant pairs (correlation 0.98) with one two-channel sparse mode per
// pair: the two sensors of a pair have the same residual direction, so plain
// contributions and the RBC of SPE cannot tell them apart (49.6 % and 35.4 %
// first), and only the RBC of φ separates them, through the sign agreement
// of its T² and SPE parts: 93.5 %, asserted as a floor of 85 %.
//
// Ranking by RBC or by RBC over its own limit (RBCᵢ/(gᵢχ²₁), whose
// in-control distribution is the same for every channel): the ratio was
// 0.5–1 point better on the smearing models and 0.5 point worse on model 1
// (96.7 % against 97.2 %). Score.Contrib stays ranked by RBC: for a pure
// single-sensor fault RBC alone guarantees the faulty channel the largest
// value (Alcalá & Qin 2009), the ratio does not; each
// Contribution carries RBCLimit, so the ratio is at hand.
func TestRBCSingleSensorBias(t *testing.T) {
	for _, seed := range []uint64{17, 19} {
		corr := mixedSensorModel(30, 0.99, 3, seed)
		sm := smearedChannels(corr, 30)
		r := rbcBias(t, fmt.Sprintf("mixed sensors, seed %d", seed), corr, modes.Config{Count: 30})
		if sm < 15 {
			t.Errorf("seed %d: only %d channels smear under the population model", seed, sm)
		}
		if r.rbcPhi < 0.95 {
			t.Errorf("seed %d: RBC(φ) ranks the faulty channel first in %.1f%% of trials, want ≥ 95%%", seed, 100*r.rbcPhi)
		}
		if r.plain > 0.70 {
			t.Errorf("seed %d: plain SPE contributions rank the faulty channel first in %.1f%%: the model does not smear", seed, 100*r.plain)
		}
	}
	for kind := 0; kind < 4; kind++ {
		mc := modes.Config{Count: 5}
		if kind == 3 {
			mc = modes.Config{Count: 25, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 2}}}
		}
		r := rbcBias(t, fmt.Sprintf("model %d", kind), fiftyChannelModel(kind), mc)
		if kind < 3 && r.rbcPhi < 0.95 {
			t.Errorf("model %d: RBC(φ) ranks the faulty channel first in %.1f%% of trials, want ≥ 95%%", kind, 100*r.rbcPhi)
		}
		if kind == 3 && (r.rbcPhi < 0.85 || r.plain > 0.6 || r.rbcPhi < r.plain+0.3) {
			t.Errorf("model 3 (redundant pairs): RBC(φ) %.1f%%, plain SPE %.1f%%: expected RBC(φ) ≥ 85%% and plain smeared", 100*r.rbcPhi, 100*r.plain)
		}
	}
}

type rbcRates struct {
	rbcPhi, rbcPhiRatio, rbcSPE, plain, t2 float64
}

// rbcBias returns the share of trials in which the faulty channel is ranked
// first by RBC(φ) (Score.Contrib), by RBC(φ) over its limit, by RBC(SPE)
// and by its plain SPE and T² contributions.
func rbcBias(t *testing.T, name string, corr *mat.SymDense, mc modes.Config) rbcRates {
	const p, trials = 50, 2000
	src := newGaussSource(53, corr)
	fit := src.frames(20000, p)
	var out rbcRates
	for _, idx := range []Index{IndexCombined, IndexSPE} {
		tr, err := New(p, Config{Modes: mc, RBCIndex: idx, FlatFrames: -1})
		if err != nil {
			t.Fatal(err)
		}
		if err := tr.Fit(fit); err != nil {
			t.Fatal(err)
		}
		trng := rand.New(rand.NewPCG(54, 55))
		fsrc := newGaussSource(56, corr)
		var sc Score
		x := make([]float64, p)
		rbc := make([]float64, p)
		spe := make([]float64, p)
		t2c := make([]float64, p)
		first, ratio, plain, t2first := 0, 0, 0, 0
		for k := 0; k < trials; k++ {
			j := trng.IntN(p)
			fsrc.frame(x)
			x[j] += 3 * tr.Stats().sdOf(j)
			if err := tr.Evaluate(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			if len(sc.Contrib) > 0 && sc.Contrib[0].Channel == j {
				first++
			}
			tr.ContributionsTo(rbc, spe, t2c)
			if argmax(spe) == j {
				plain++
			}
			if argmax(t2c) == j {
				t2first++
			}
			for i := range rbc {
				rbc[i] /= tr.mdl.base.rbcLim[i]
			}
			if argmax(rbc) == j {
				ratio++
			}
		}
		if idx == IndexCombined {
			out.rbcPhi = float64(first) / trials
			out.rbcPhiRatio = float64(ratio) / trials
		} else {
			out.rbcSPE = float64(first) / trials
		}
		out.plain = float64(plain) / trials
		out.t2 = float64(t2first) / trials
	}
	t.Logf("%s: faulty channel ranked first: RBC(φ) %.1f%%, RBC(φ)/limit %.1f%%, RBC(SPE) %.1f%%, plain SPE contribution %.1f%%, T² contribution %.1f%% (%d trials)",
		name, 100*out.rbcPhi, 100*out.rbcPhiRatio, 100*out.rbcSPE, 100*out.plain, 100*out.t2, trials)
	return out
}

func (e *EW) sdOf(i int) float64 { return math.Sqrt(e.Var(i)) }

func argmax(x []float64) int {
	b := 0
	for i, v := range x {
		if v > x[b] {
			b = i
		}
	}
	return b
}

func newStream(t *testing.T, p int, cfg Config) (*Tracker, *gaussSource) {
	t.Helper()
	tr, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(uint64(p), 7))
	return tr, newGaussSource(61, randomCov(rng, p, 3))
}

// warmStream is newStream stepped through n frames of its source: it
// returns the last frame's score and the frame buffer too. A step error
// ends the test.
func warmStream(t *testing.T, p int, cfg Config, n int) (*Tracker, *gaussSource, Score, []float64) {
	t.Helper()
	tr, src := newStream(t, p, cfg)
	sc, x := stepThrough(t, tr, src, p, n)
	return tr, src, sc, x
}

// stepThrough steps tr through n frames of src (p channels) and returns
// the last frame's score and the frame buffer. A step error ends the
// test, naming the frame.
func stepThrough(t *testing.T, tr *Tracker, src *gaussSource, p, n int) (Score, []float64) {
	t.Helper()
	var sc Score
	x := make([]float64, p)
	for k := 0; k < n; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatalf("frame %d: %v", k, err)
		}
	}
	return sc, x
}

// Warm-up: no scores before WarmUp learned frames, stated in the output;
// then scores with limits.
func TestWarmUpAndRefresh(t *testing.T) {
	const p = 8
	tr, src := newStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 40, RefreshEvery: 10,
		Modes: modes.Config{Count: 2, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 3}}}})
	var sc Score
	x := make([]float64, p)
	for k := 1; k <= 40; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		if sc.Ready || sc.State != StateWarmUp {
			t.Fatalf("frame %d: ready %v state %v during warm-up", k, sc.Ready, sc.State)
		}
	}
	if err := tr.Step(&sc, src.frame(x), nil); err != nil {
		t.Fatal(err)
	}
	if !sc.Ready || sc.State != StateAdapting || sc.Modes != 2 || !(sc.T2Limit > 0 && sc.SPELimit > 0 && sc.PhiLimit > 0) {
		t.Fatalf("after warm-up: %+v", sc)
	}
	approx(t, "n_eff after 40 equal-weight frames", sc.NEff, 40, 0, 1e-9)
	if got := sc.State.String(); got != "adapting" {
		t.Errorf("state string %q", got)
	}
	// Each contributor lists exactly the modes whose support holds it.
	if len(sc.Contrib) == 0 {
		t.Fatal("no contributors")
	}
	for _, c := range sc.Contrib {
		var want []int
		for j := 0; j < tr.Modes().Count(); j++ {
			md := tr.Modes().Mode(j)
			if slices.Contains(md.Support, c.Channel) {
				want = append(want, md.ID)
			}
		}
		if !slices.Equal(c.Modes, want) {
			t.Errorf("channel %d: modes %v, want %v", c.Channel, c.Modes, want)
		}
	}
	for i := 1; i < len(sc.Contrib); i++ {
		if sc.Contrib[i].RBC > sc.Contrib[i-1].RBC {
			t.Error("contributors not ranked by RBC")
		}
	}
}

// Freeze stops learning (statistics unchanged, state frozen); Thaw resumes.
func TestFreezeThaw(t *testing.T) {
	const p = 6
	tr, src, sc, x := warmStream(t, p, Config{Period: time.Second, HalfLife: time.Minute, WarmUp: 30, Modes: modes.Config{Count: 2}}, 50)
	tr.Freeze()
	before := tr.Stats().MeanTo(make([]float64, p))
	for k := 0; k < 20; k++ {
		x = src.frame(x)
		x[0] += 100 // a fault that must not be learned
		tr.Step(&sc, x, nil)
		if !sc.Frozen || sc.State != StateFrozen {
			t.Fatal("not frozen")
		}
	}
	after := tr.Stats().MeanTo(make([]float64, p))
	if !slices.Equal(before, after) {
		t.Error("frozen tracker learned")
	}
	if sc.T2 <= sc.T2Limit && sc.SPE <= sc.SPELimit {
		t.Error("fault of 100 units not detected")
	}
	tr.Thaw()
	tr.Step(&sc, src.frame(x), nil)
	if sc.Frozen {
		t.Error("still frozen after Thaw")
	}
	if tr.Stats().Mean(0) == after[0] {
		t.Error("no learning after Thaw")
	}
}

// A flat-lined channel is excluded and reported, never a NaN or infinite
// score; a channel constant from the start is excluded from the model.
func TestStuckChannel(t *testing.T) {
	const p = 8
	tr, src := newStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 50, RefreshEvery: 16, FlatFrames: 20, Modes: modes.Config{Count: 2}})
	var sc Score
	x := make([]float64, p)
	for k := 0; k < 300; k++ {
		src.frame(x)
		x[7] = 42 // constant from the start
		if k >= 150 {
			x[3] = 7.5 // stuck from frame 150
		}
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		for _, v := range []float64{sc.T2, sc.SPE, sc.Phi, sc.T2Limit, sc.SPELimit, sc.PhiLimit} {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("frame %d: non-finite score %+v", k, sc)
			}
		}
		if sc.Ready && !slices.Contains(sc.Excluded, 7) {
			t.Fatalf("frame %d: constant channel 7 not excluded: %v", k, sc.Excluded)
		}
		if k >= 150+20 && !slices.Contains(sc.Excluded, 3) {
			t.Fatalf("frame %d: stuck channel 3 not excluded: %v", k, sc.Excluded)
		}
		for _, c := range sc.Contrib {
			if c.Channel == 7 || (k >= 170 && c.Channel == 3) {
				t.Fatalf("frame %d: excluded channel %d among contributors", k, c.Channel)
			}
		}
	}
	if tr.mdl.include[3] || tr.mdl.include[7] {
		t.Error("stuck channels still in the model after a refresh")
	}
}

// Missing channels: the result lists them, the scores are finite, the
// limits are those of the reduced problem, and the missing channels'
// statistics are not updated.
func TestStepMissing(t *testing.T) {
	const p = 10
	tr, src, sc, x := warmStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 100, Modes: modes.Config{Count: 3}}, 200)
	full := sc
	miss := make([]bool, p)
	miss[2], miss[5] = true, true
	src.frame(x)
	x[5] = math.NaN()
	v2, v5 := tr.Stats().Var(2), tr.Stats().Var(5)
	if err := tr.Step(&sc, x, miss); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(sc.Missing, []int{2, 5}) {
		t.Errorf("Missing = %v", sc.Missing)
	}
	if sc.SPELimit == full.SPELimit || math.IsNaN(sc.SPE) || math.IsNaN(sc.T2) {
		t.Errorf("reduced problem: SPE %v limit %v (full %v), T² %v", sc.SPE, sc.SPELimit, full.SPELimit, sc.T2)
	}
	if tr.Stats().Var(2) != v2 || tr.Stats().Var(5) != v5 {
		t.Error("missing channels' statistics updated")
	}
	// NaN without a missing flag is treated as missing.
	x[5] = math.NaN()
	if err := tr.Step(&sc, x, nil); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(sc.Missing, []int{5}) {
		t.Errorf("Missing = %v for a NaN value", sc.Missing)
	}
	if err := tr.Step(&sc, x[:3], nil); !errors.Is(err, ErrWidth) {
		t.Errorf("short frame: %v", err)
	}
}

// Zero allocations per frame: update, scoring, contributions and the
// amortised refresh, with complete frames, with a cached missing pattern and
// with a new missing pattern after warm-up (testing.AllocsPerRun).
// Only the first incomplete frame in the tracker's life allocates (the p × p
// factor buffer), done here before the measurements.
// allocTracker returns a 30-channel tracker that refreshes every 8 frames,
// warmed up on 200 frames, and 64 frames to cycle through.
func allocTracker(t *testing.T) (*Tracker, [][]float64, *Score) { return allocTrackerP(t, 30) }

// allocTrackerP is allocTracker with p channels.
func allocTrackerP(t *testing.T, p int) (*Tracker, [][]float64, *Score) {
	tr, src := newStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 80, RefreshEvery: 8, Batch: 4,
		Modes: modes.Config{Count: 4, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 6}}}})
	var sc Score
	xs := src.frames(64, p)
	for k := 0; k < 200; k++ {
		tr.Step(&sc, xs[k%64], nil)
	}
	return tr, xs, &sc
}

func TestStepAllocs(t *testing.T) {
	const p = 30
	tr, xs, scp := allocTracker(t)
	sc := *scp
	miss := make([]bool, p)
	miss[4] = true
	tr.Step(&sc, xs[0], miss)
	k := 0
	allocs := testing.AllocsPerRun(200, func() {
		tr.Step(&sc, xs[k%64], nil)
		k++
	})
	if allocs != 0 {
		t.Errorf("Step allocates %v per frame", allocs)
	}
	tr.Freeze()
	tr.Step(&sc, xs[0], miss)
	allocs = testing.AllocsPerRun(100, func() {
		tr.Step(&sc, xs[k%64], miss)
		k++
	})
	if allocs != 0 {
		t.Errorf("Step with a cached missing pattern allocates %v per frame", allocs)
	}
	// New missing patterns (1–3 channels, 40 distinct ones cycling through
	// the 16 cache slots) while learning, with refreshes every 8 frames (each
	// clears the cache and the next incomplete frame refactors A + εI): the
	// factor, the precision rows, H and K go to preallocated storage.
	tr.Thaw()
	pats := make([][]bool, 40)
	for j := range pats {
		pats[j] = make([]bool, p)
		for c := 0; c <= j%3; c++ {
			pats[j][(j*7+c*11)%p] = true
		}
	}
	// testing.AllocsPerRun divides by the runs (an allocation every few
	// frames would read as 0), so count every allocation over the 200 frames.
	// dst's Missing list grows with the largest missing set seen (Score's
	// slices are the caller's, reused); size it once as a service would.
	sc.Missing = make([]int, 0, p)
	if d := mallocsOver(200, func(int) {
		if err := tr.Step(&sc, xs[k%64], pats[k%40]); err != nil {
			t.Fatal(err)
		}
		k++
	}); d != 0 {
		t.Errorf("200 frames with new missing patterns made %d allocations", d)
	}
	if !sc.Ready || len(sc.Missing) == 0 {
		t.Fatalf("not scored with missing channels: %+v", sc)
	}
}

func TestConfigErrors(t *testing.T) {
	for _, c := range []Config{
		{Alpha: 1.5},
		{HalfLife: time.Hour},
		{RefreshEvery: -1},
		{T2Limit: 7},
		{Modes: modes.Config{Count: 99}},
	} {
		if _, err := New(10, c); !errors.Is(err, ErrConfig) {
			t.Errorf("%+v: want ErrConfig, got %v", c, err)
		}
	}
}

// Slow legitimate change (every channel's level drifts by 4 standard
// deviations and the gains of the load factor change by 30 % over 30,000
// frames) is followed by the adaptive model: its exceedance rate stays near
// α (from both sides) and a fault right after the drift still alarms,
// while a baseline fitted on the first frames and held fixed alarms on
// most frames (recursive PCA motivation: Li, Yue, Valle-Cervantes & Qin
// 2000, "slow and normal process changes … lead to false alarms for a
// fixed-model monitoring approach").
func TestAdaptiveFollowsDrift(t *testing.T) {
	const p, n, warm = 10, 30000, 2000
	rng := rand.New(rand.NewPCG(91, 92))
	gain := make([]float64, p)
	for i := range gain {
		gain[i] = 0.5 + rng.Float64()
	}
	frame := func(k int, x []float64) []float64 {
		s := float64(k) / n
		u := rng.NormFloat64()
		for i := range x {
			x[i] = 10*float64(i) + 4*s + gain[i]*(1+0.3*s)*u + 0.5*rng.NormFloat64()
		}
		return x
	}
	ad, err := New(p, Config{Period: time.Second, HalfLife: 10 * time.Minute, WarmUp: warm, Modes: modes.Config{Count: 1}})
	if err != nil {
		t.Fatal(err)
	}
	fixed, err := New(p, Config{Modes: modes.Config{Count: 1}})
	if err != nil {
		t.Fatal(err)
	}
	first := make([][]float64, warm)
	x := make([]float64, p)
	var sa, sf Score
	var overA, overF exceed // T², SPE (and φ, not compared)
	scored := 0
	// After the drift, a fault the adaptive model must still see: channel 3
	// leaves the relation by 6 noise standard deviations for faultN frames.
	const faultN = 200
	var hitA, hitSPE int
	for k := 0; k < n+faultN; k++ {
		frame(k, x)
		if k >= n {
			x[3] += 3
			if err := ad.Step(&sa, x, nil); err != nil {
				t.Fatal(err)
			}
			if sa.T2 > sa.T2Limit || sa.SPE > sa.SPELimit {
				hitA++
			}
			if sa.SPE > sa.SPELimit {
				hitSPE++
			}
			continue
		}
		if k < warm {
			first[k] = append([]float64(nil), x...)
		}
		if err := ad.Step(&sa, x, nil); err != nil {
			t.Fatal(err)
		}
		if k == warm {
			if err := fixed.Fit(first); err != nil {
				t.Fatal(err)
			}
		}
		if k <= warm {
			continue
		}
		fixed.Evaluate(&sf, x, nil)
		scored++
		overA.add(&sa)
		overF.add(&sf)
	}
	ra := [2]float64{float64(overA[0]) / float64(scored), float64(overA[1]) / float64(scored)}
	rf := [2]float64{float64(overF[0]) / float64(scored), float64(overF[1]) / float64(scored)}
	t.Logf("exceedances over %d drifting frames: adaptive T² %.2f%% SPE %.2f%%; fixed baseline T² %.2f%% SPE %.2f%%",
		scored, 100*ra[0], 100*ra[1], 100*rf[0], 100*rf[1])
	t.Logf("fault after the drift: adaptive alarms on %d of %d frames (SPE %d)", hitA, faultN, hitSPE)
	// Near α from both sides: a model whose limits never let anything
	// through (or that never scores) has no exceedances at all. The bar
	// [0.5 %, 2.5 %] is wide because the adapting model's exceedances are
	// correlated in time (a binomial count of 28,000 independent frames
	// would stay within 1 ± 0.2 %).
	for j, name := range []string{"T²", "SPE"} {
		if ra[j] > 0.025 || ra[j] < 0.005 {
			t.Errorf("adaptive %s exceedance %.2f%% under slow drift, want near α = 1%% (0.5–2.5 %%)", name, 100*ra[j])
		}
	}
	// And it still sees a fault: at least 40 of the 200 fault frames over
	// a limit, twenty times what α = 1 % on either statistic would give.
	if hitA < 40 {
		t.Errorf("adaptive model alarms on %d of %d frames of a 6σ fault after the drift, want ≥ 40", hitA, faultN)
	}
	if rf[0]+rf[1] < 0.3 {
		t.Errorf("fixed baseline exceedances %.2f%% / %.2f%%: drift too weak for the test", 100*rf[0], 100*rf[1])
	}
}

// Grow: a unit's registry grows from 6 to 8 channels while the model runs.
// The old channels keep their statistics bit for bit and their scores are
// unchanged to the mode solver's tolerance (dense modes rebuilt from the
// same correlation, cold-started); the new
// channels are listed as warming, stay out of the model until they have
// WarmUp frames, then enter it at a refresh; frames keep batching; the
// grown tracker's checkpoint restores into New(8, cfg) with bit-identical
// scores; shrinking is an error.
func TestGrow(t *testing.T) {
	const p, p2 = 6, 8
	rng := rand.New(rand.NewPCG(71, 72))
	corr := randomCov(rng, p2, 3)
	src := newGaussSource(73, corr)
	cfg := Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 50, RefreshEvery: 16, Modes: modes.Config{Count: 3}}
	tr, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	var sc Score
	x := make([]float64, p2)
	for k := 0; k < 200; k++ {
		src.frame(x)
		if err := tr.Step(&sc, x[:p], nil); err != nil {
			t.Fatal(err)
		}
	}
	src.frame(x)
	var before, after Score
	if err := tr.Evaluate(&before, x[:p], nil); err != nil {
		t.Fatal(err)
	}
	c0 := covOf(tr.Stats())
	if err := tr.Grow(p2, cfg); err != nil {
		t.Fatal(err)
	}
	c1 := covOf(tr.Stats())
	if err := tr.Evaluate(&after, x, []bool{6: true, 7: true}); err != nil {
		t.Fatal(err)
	}
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			if c0.At(i, j) != c1.At(i, j) {
				t.Fatalf("cov[%d,%d] changed by Grow: %v → %v", i, j, c0.At(i, j), c1.At(i, j))
			}
		}
	}
	// The modes are recomputed from a cold start on the same correlation:
	// equal to the solver's tolerance.
	approx(t, "T² after Grow", after.T2, before.T2, 0, 1e-5)
	approx(t, "SPE after Grow", after.SPE, before.SPE, 0, 1e-5)
	approx(t, "SPE limit after Grow", after.SPELimit, before.SPELimit, 0, 1e-5)
	if err := tr.Grow(p, cfg); !errors.Is(err, ErrWidth) {
		t.Errorf("shrink: %v", err)
	}
	other := cfg
	other.HalfLife = time.Minute
	if err := tr.Grow(p2+1, other); !errors.Is(err, ErrConfig) || tr.P() != p2 {
		t.Errorf("Grow with another half-life: %v, width %d", err, tr.P())
	}
	// Learn with all 8 channels; 6 and 7 warm up for WarmUp = 50 frames
	// and enter at the next refresh.
	entered := -1
	batched := false
	for k := 1; k <= 100; k++ {
		src.frame(x)
		nb := tr.ew.nb
		in := tr.mdl.include[6] && tr.mdl.include[7] // the model that scores this frame
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		batched = batched || tr.ew.nb == nb+1
		if in && entered < 0 {
			entered = k
		}
		if !in && !slices.Equal(sc.Warming, []int{6, 7}) {
			t.Fatalf("frame %d: Warming = %v, Excluded = %v", k, sc.Warming, sc.Excluded)
		}
		if in && len(sc.Warming) != 0 {
			t.Fatalf("frame %d: in the model but still warming", k)
		}
	}
	if entered < 50 || entered > 50+16 {
		t.Errorf("new channels entered the model after %d frames, want after 50 (WarmUp) at the next refresh", entered)
	}
	if !batched {
		t.Error("frames after Grow were not batched")
	}
	// Checkpoint of the grown tracker into New(8, cfg).
	ck, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	stepBoth(t, tr, restoreTracker(t, p2, cfg, ck), src, p2, 40, "score after restore")
}

// Phase I T² limit, selectable: a baseline fitted on m = 24 frames with 3
// dense modes has the Tracy, Young & Mason (1992) limit
// (m−1)²/m·B_{1−α}(l/2, (m−l−1)/2) (l = 3, m = 24, α = 0.01: 9.379347,
// computed), and no fit frame scored
// against it exceeds (m−1)²/m = 22.041667, the largest T² a reference frame
// can take (hand derivation). The default Phase II F form on a
// baseline of m = 23 frames is the NIST e-Handbook 6.5.4.3.4 limit
// p(m+1)(m−1)/(m(m−p))·F_{1−α}(p, m−p) = 17.00456.
func TestT2PhaseI(t *testing.T) {
	const p = 6
	rng := rand.New(rand.NewPCG(81, 82))
	src := newGaussSource(83, randomCov(rng, p, 3))
	for _, c := range []struct {
		form T2Form
		m    int
		want float64
	}{{T2PhaseI, 24, 9.379347}, {T2F, 23, 17.00456}} {
		fit := src.frames(c.m, p)
		tr, err := New(p, Config{Modes: modes.Config{Count: 3}, T2Limit: c.form, FlatFrames: -1, WarmUp: 10})
		if err != nil {
			t.Fatal(err)
		}
		if err := tr.Fit(fit); err != nil {
			t.Fatal(err)
		}
		var sc Score
		worst := 0.0
		for _, x := range fit {
			if err := tr.Evaluate(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			worst = math.Max(worst, sc.T2)
		}
		approx(t, "T² limit", sc.T2Limit, c.want, 0, 1e-6)
		if bound := float64((c.m-1)*(c.m-1)) / float64(c.m); worst > bound {
			t.Errorf("m = %d: a fit frame has T² %v > (m−1)²/m = %v", c.m, worst, bound)
		}
	}
}

// Modes that span every channel leave an empty residual subspace: SPE is
// identically zero, so it cannot alarm (limit +∞), and φ reduces to T²/τ²
// with the limit of the T² part alone (Yue & Qin 2001 with the SPE term
// dropped: tr(SΦ) = l/τ², tr((SΦ)²) = l/τ⁴, so ζ² = χ²_{1−α}(l)/τ² — derived).
// Before this case was handled the φ traces were +∞ and the limit
// computation never returned (found by replaying the demo with l0:3).
func TestEmptyResidualSubspace(t *testing.T) {
	const p = 4
	tr, src := newStream(t, p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 40, RefreshEvery: 10,
		T2Limit: T2ChiSquare,
		Modes:   modes.Config{Count: p, MaxCount: p, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 1}}}})
	var sc Score
	x := make([]float64, p)
	for k := 0; k < 200; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
	}
	if !sc.Ready || sc.Modes != p {
		t.Fatalf("ready %v with %d modes, want %d", sc.Ready, sc.Modes, p)
	}
	if !math.IsInf(sc.SPELimit, 1) {
		t.Errorf("SPE limit %v with an empty residual subspace, want +Inf", sc.SPELimit)
	}
	if math.IsNaN(sc.SPE) || sc.SPE > 1e-9 {
		t.Errorf("SPE %v, want 0 up to rounding", sc.SPE)
	}
	chi := limits.ChiSquare(0.99, p)
	approx(t, "φ limit = χ²(l)/τ²", sc.PhiLimit, chi/sc.T2Limit, 0, 1e-9)
	approx(t, "φ = T²/τ²", sc.Phi, sc.T2/sc.T2Limit, 1e-12, 1e-9)
}

// TestStateString: every state has its name as views and records show it,
// and a value outside the constants says what it is.
func TestStateString(t *testing.T) {
	for s, want := range map[State]string{StateWarmUp: "warmup", StateAdapting: "adapting", StateFrozen: "frozen",
		StateBaseline: "baseline", State(7): "State(7)", State(-1): "State(-1)"} {
		if got := s.String(); got != want {
			t.Errorf("State(%d).String() = %q, want %q", int(s), got, want)
		}
	}
}

// TestDrivers: the regression of the own channels on the context channels
// matches gonum's least-squares solve of A_cc B' = A_co on the same
// correlation matrix (reference: gonum mat.Dense.Solve), and a frame whose
// own channels sit at their conditional mean given a driver far outside
// its normal range is adjusted to the channel means.
func TestDrivers(t *testing.T) {
	const p = 4 // channels 0, 1 own; 2, 3 context
	tr, err := New(p, Config{Period: time.Second, WarmUp: 200})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	var sc Score
	x := make([]float64, p)
	for k := 0; k < 3000; k++ {
		c1, c2 := rng.NormFloat64(), rng.NormFloat64()
		x[0] = 10 + 2*c1 - c2 + 0.3*rng.NormFloat64()
		x[1] = -5 + 0.5*c2 + 0.3*rng.NormFloat64()
		x[2], x[3] = 3+c1, 7+2*c2
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
	}
	d, err := NewDrivers(p, []bool{false, false, true, true})
	if err != nil {
		t.Fatal(err)
	}
	if err := d.Fit(tr); err != nil {
		t.Fatal(err)
	}
	// Reference: B' = A_cc⁻¹ A_co by gonum.
	a := mat.NewSymDense(p, nil)
	tr.ew.CorrTo(a, nil)
	acc := mat.NewDense(2, 2, []float64{a.At(2, 2) + tr.cfg.Ridge, a.At(2, 3), a.At(3, 2), a.At(3, 3) + tr.cfg.Ridge})
	aco := mat.NewDense(2, 2, []float64{a.At(2, 0), a.At(2, 1), a.At(3, 0), a.At(3, 1)})
	var bt mat.Dense
	if err := bt.Solve(acc, aco); err != nil {
		t.Fatal(err)
	}
	for r := 0; r < 2; r++ {
		for c := 0; c < 2; c++ {
			if got, want := d.b[r*2+c], bt.At(c, r); !scalar.EqualWithinAbsOrRel(got, want, 1e-9, 1e-9) {
				t.Errorf("B[%d][%d] = %v, gonum %v", r, c, got, want)
			}
		}
	}
	// Drivers 4 σ and −5 σ out, own channels where they lead them.
	c1, c2 := 4.0, -5.0
	x = []float64{10 + 2*c1 - c2, -5 + 0.5*c2, 3 + c1, 7 + 2*c2}
	adj := make([]float64, p)
	d.Adjust(adj, x, nil, tr)
	for i := 0; i < p; i++ {
		sd := math.Sqrt(tr.ew.Var(i))
		if dz := (adj[i] - tr.ew.Mean(i)) / sd; math.Abs(dz) > 0.1 {
			t.Errorf("channel %d adjusted to %.3f σ from its mean; want the drivers' part removed", i, dz)
		}
	}
	if n := testing.AllocsPerRun(100, func() { d.Adjust(adj, x, nil, tr) }); n != 0 {
		t.Errorf("Adjust allocates %v", n)
	}
	if n := testing.AllocsPerRun(20, func() { _ = d.Fit(tr) }); n != 0 {
		t.Errorf("Fit allocates %v", n)
	}
}
