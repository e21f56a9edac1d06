package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"

	"modewatch/tracker/modes"
)

// creepLearner returns a tracker of p channels that learns (long
// half-life, so that its statistics are near equal-weight averages) with
// the creep statistic at weight lam and nModes modes of at most k
// channels each.
func creepLearner(t *testing.T, p int, lam float64, nModes, k int) *Tracker {
	t.Helper()
	cfg := Config{Period: time.Second, HalfLife: 1000 * time.Hour, WarmUp: 500, Creep: true, CreepLambda: lam,
		Modes: modes.Config{Count: nModes, Sparsity: []modes.Sparsity{{Method: modes.L0, K: k}}}}
	tr, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	return tr
}

// ewmaAR1Var is the variance of the EWMA (weight λ) of a stationary AR(1)
// series of coefficient φ and variance σ² (derived: with w = 1 − λ,
// Var = λ²σ² Σⱼ Σₖ wʲwᵏφ^|j−k| = λ²σ²/(1 − w²)·(1 + wφ)/(1 − wφ), and
// 1 − w² = λ(2 − λ)):
//
//	σ²·λ(1 + (1 − λ)φ) / ((2 − λ)(1 − (1 − λ)φ))
//
// For φ = 0 it is λσ²/(2 − λ), the variance of the EWMA of independent
// values (Lucas & Saccucci 1990, Technometrics 32(1), 1–12).
func ewmaAR1Var(lam, phi, s2 float64) float64 {
	w := 1 - lam
	return s2 * lam * (1 + w*phi) / ((2 - lam) * (1 - w*phi))
}

// The closed form above against a direct simulation (gonum/stat variance
// of an EWMA of a seeded AR(1) series): it is the value the tracker's
// learned variance is checked against below.
func TestEwmaAR1VarFormula(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, c := range []struct{ lam, phi float64 }{{0.05, 0}, {0.05, 0.9}, {0.2, 0.5}} {
		x, y := 0.0, 0.0
		sd := math.Sqrt(1 - c.phi*c.phi) // innovations for unit variance
		var ys []float64
		for k := 0; k < 400000; k++ {
			x = c.phi*x + sd*rng.NormFloat64()
			y += c.lam * (x - y)
			if k > 2000 {
				ys = append(ys, y)
			}
		}
		got, want := stat.Variance(ys, nil), ewmaAR1Var(c.lam, c.phi, 1)
		if math.Abs(got-want) > 0.05*want {
			t.Errorf("λ %v, φ %v: simulated variance %.5f, formula %.5f", c.lam, c.phi, got, want)
		}
	}
}

// In control with independent frames (the two-factor channels, two
// modes), each channel's learned normal variance of its smoothed residual
// is the EWMA variance λ/(2 − λ) of a unit-variance series (Lucas &
// Saccucci 1990), so the terms s̄ᵢ²/vᵢ average 1; the limit of the largest
// term is χ²_{1−α/p}(1) = z²_{1−α/(2p)} with α = 0.01, p = 8: 10.4155
// (Python statistics.NormalDist().inv_cdf(1 − 0.01/16)², 3.22733²).
func TestCreepInControl(t *testing.T) {
	const lam = 0.05
	src := newGaussSource(81, twoFactorCorr())
	tr := creepLearner(t, 8, lam, 2, 4)
	var sc Score
	x := make([]float64, 8)
	terms := make([]float64, 8)
	var sum float64
	var n int
	for k := 0; k < 80000; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		if k < 20000 || sc.CreepLimit == 0 {
			continue
		}
		tr.CreepTermsTo(terms)
		for _, v := range terms {
			sum += v
		}
		n += 8
	}
	g := lam / (2 - lam)
	cr := tr.cr
	for i, v := range cr.v {
		if math.Abs(v/g-1) > 0.12 {
			t.Errorf("channel %d: learned variance %.5f, want λ/(2 − λ) = %.5f within 12 %%", i, v, g)
		}
	}
	mean := sum / float64(n)
	t.Logf("mean term %.3f over %d channel-frames; v/g %v", mean, n, func() []float64 {
		r := make([]float64, 8)
		for i, v := range cr.v {
			r[i] = v / g
		}
		return r
	}())
	if math.Abs(mean-1) > 0.08 {
		t.Errorf("mean term s̄²/v %.3f, want 1 within 8 %%", mean)
	}
	if want := 10.4155; math.Abs(sc.CreepLimit-want) > 2e-3 {
		t.Errorf("limit %v, want χ²_{1−0.01/8}(1) = %v", sc.CreepLimit, want)
	}
}

// arSource is the two-factor source with an AR(1) series of coefficient
// phi and standard deviation sd (in the channel's standardized units)
// added to channel ch: a sensor-specific wander.
type arSource struct {
	*gaussSource
	ch      int
	phi, sd float64
	x       float64
	rng     *rand.Rand
}

func (s *arSource) frame(dst []float64) []float64 {
	s.gaussSource.frame(dst)
	s.x = s.phi*s.x + math.Sqrt(1-s.phi*s.phi)*s.rng.NormFloat64()
	dst[s.ch] += s.sd * s.gaussSource.sd[s.ch] * s.x
	return dst
}

// A channel whose residual is an AR(1) series (φ = 0.9) has the learned
// normal variance of its smoothed residual given by the closed form of
// ewmaAR1Var, many times the independent-frame value, while the other
// channels keep λ/(2 − λ). Channels 0–3 are tied (one mode of four), 4–7
// independent of each other and of them; channel 6 carries the AR(1)
// series alone (its standardized residual is then the series itself: Ω and
// D have no cross terms there).
func TestCreepLearnsAR1Variance(t *testing.T) {
	const lam, phi = 0.05, 0.9
	corr := blockCorrelation(8, 4, 0.81)
	for i := 4; i < 8; i++ {
		for j := 4; j < 8; j++ {
			if i != j {
				corr.SetSym(i, j, 0)
			}
		}
	}
	src := &arSource{gaussSource: newGaussSource(83, corr), ch: 6, phi: phi, sd: 3, rng: rand.New(rand.NewPCG(7, 8))}
	tr := creepLearner(t, 8, lam, 1, 4)
	var sc Score
	x := make([]float64, 8)
	for k := 0; k < 200000; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
	}
	g := lam / (2 - lam)
	// The standardized channel 6 is (noise + 3·AR)/√10: a share 9/10 of
	// AR(1) with φ, 1/10 independent.
	want := ewmaAR1Var(lam, phi, 0.9) + ewmaAR1Var(lam, 0, 0.1)
	v := tr.cr.v
	t.Logf("v₆ %.4f, closed form %.4f (independent %.4f); others %v", v[6], want, g, v)
	if math.Abs(v[6]-want) > 0.08*want {
		t.Errorf("AR(1) channel: learned variance %.4f, closed form %.4f (8 %%)", v[6], want)
	}
	for _, i := range []int{4, 5, 7} {
		if math.Abs(v[i]-g) > 0.1*g {
			t.Errorf("independent channel %d: learned variance %.5f, want %.5f (10 %%)", i, v[i], g)
		}
	}
}

// A shift of half a conditional standard deviation in one tight relation
// (channel 1 of the two-factor channels), held while learning is frozen
// (as during an incident), is seen by the creep statistic and named,
// while a wandering channel (channel 6: a slow AR(1), τ = 1000 frames,
// whose standard deviation is that same half conditional deviation) does
// not alarm in control. The MEWMA statistic on the same frames, normalised
// for independent frames, is over its limit in a large share of the
// in-control frames: the wander it cannot price (derived check; the
// shift's size and rates as in TestMewmaSeesSmallShift).
func TestCreepShiftNotWander(t *testing.T) {
	const lam = 0.05
	corr := twoFactorCorr()
	om, _ := refPrecision(t, corr, 0)
	half := func(i int) float64 { return 0.5 / math.Sqrt(om.At(i, i)) } // in standardized units of the source
	src := &arSource{gaussSource: newGaussSource(85, corr), ch: 6, phi: math.Exp(-1.0 / 1000), sd: half(6), rng: rand.New(rand.NewPCG(9, 10))}
	cfg := Config{Period: time.Second, HalfLife: 1000 * time.Hour, WarmUp: 500, Creep: true, CreepLambda: lam,
		Mewma: true, MewmaLambda: lam, Modes: modes.Config{Count: 2}}
	tr, err := New(8, cfg)
	if err != nil {
		t.Fatal(err)
	}
	var sc Score
	x := make([]float64, 8)
	for k := 0; k < 300000; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
	}
	tr.Freeze()
	run := func(n int, shift float64) (creep, mw float64, named int) {
		for k := 0; k < n; k++ {
			src.frame(x)
			x[1] += shift * src.gaussSource.sd[1]
			if err := tr.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			if sc.Creep > sc.CreepLimit {
				creep++
				if sc.CreepChannel == 1 {
					named++
				}
			}
			if sc.Mewma > sc.MewmaLimit {
				mw++
			}
		}
		return creep / float64(n), mw / float64(n), named
	}
	inCr, inMw, _ := run(40000, 0)
	t.Logf("in control (wander on channel 6): creep over its limit %.4f, MEWMA %.4f of frames; v₆/v₁ %.1f",
		inCr, inMw, tr.cr.v[6]/tr.cr.v[1])
	if inCr > 0.01 {
		t.Errorf("in control: creep statistic over its limit in %.4f of frames, want ≤ 0.01", inCr)
	}
	if inMw < 0.1 {
		t.Errorf("in control: MEWMA over its limit in %.4f of frames; the wander should push the independent-frame normalisation over (≥ 0.1)", inMw)
	}
	run(200, half(1)) // z̄ settles (10/λ frames)
	outCr, _, named := run(3000, half(1))
	t.Logf("shifted: creep over its limit %.3f of frames, channel 1 named in %d", outCr, named)
	if outCr < 0.2 {
		t.Errorf("shift of half a conditional deviation: creep over its limit in %.3f of frames, want ≥ 0.2", outCr)
	}
	if over := int(outCr * 3000); named < over*9/10 {
		t.Errorf("channel 1 named in %d of %d frames over the limit, want ≥ 90 %%", named, over)
	}
	wantLeader(t, &sc, 1)
}

// The creep statistic's state travels in the checkpoint (version 7): a
// tracker restored mid-stream gives bit-identical values to an
// uninterrupted one, also above creepFullP channels, where the
// normalisers are state; the same state written as version 6 (no creep
// section) starts again from the independent-frame moments and differs, so
// the comparison can fail; a non-finite or non-positive value is refused.
func TestCheckpointCreepState(t *testing.T) {
	const p = 9
	cfg := stateCheckpointConfig()
	cfg.Creep, cfg.CreepLambda = true, 0.1
	type cv struct {
		c, l float64
		ch   int
	}
	ready := func(sc *Score) bool { return sc.CreepLimit > 0 }
	pick := func(sc *Score) cv { return cv{sc.Creep, sc.CreepLimit, sc.CreepChannel} }
	ck, replay := replayCheck(t, p, cfg, 317, 300, "creep statistic", ready, pick, func(a, b cv) bool {
		return math.Float64bits(a.c) == math.Float64bits(b.c) && math.Float64bits(a.l) == math.Float64bits(b.l) && a.ch == b.ch
	})
	{
		const p = 130 // above creepFullP: an evaluation every 4 frames, normalisers every 256
		cfg := cfg
		cfg.RefreshEvery = 64
		replayCheck(t, p, cfg, 1000, 600, "creep statistic", ready, pick, func(a, b cv) bool {
			return math.Float64bits(a.c) == math.Float64bits(b.c) && a.ch == b.ch
		})
	}

	sec := 1 + 5*8*p
	at := len(ck) - 4 - modesLen(t, p, cfg, ck) - 4 - 1 - sec // the creep section, then the level flag (0 here) and the modes
	if ck[at] != 1 {
		t.Fatalf("creep flag %d at byte %d, want 1", ck[at], at)
	}
	if same, _ := replay(asVersion(ck, 6, at, sec+1)); same { // version 6: no creep section, no level flag
		t.Error("a version 6 checkpoint (creep state dropped) gave the same creep statistic: the test cannot see the state")
	}
	for _, c := range []struct {
		name string
		off  int // value offset within the section
		v    float64
	}{
		{"NaN smoothed frame", 1 + 8*3, math.NaN()},
		{"zero variance", 1 + 8*(2*p+1), 0},
		{"negative normaliser", 1 + 8*(4*p+2), -1},
	} {
		refusesFloat(t, p, cfg, ck, at+c.off, c.v, c.name)
	}
}

// Step with the creep statistic allocates nothing: in control and in
// frames whose contributors it ranks.
func TestCreepStepAllocs(t *testing.T) {
	sc := checkStepAllocs(t, creepLearner(t, 8, 0.05, 2, 4), newGaussSource(87, twoFactorCorr()), 3000, true)
	if sc.CreepChannel != 1 {
		t.Errorf("shifted: creep channel %d, want 1", sc.CreepChannel)
	}
}

// Above creepFullP channels Mz̄ is formed every ⌈p/creepFullP⌉² frames and
// the statistic held in between; Evaluate changes no state.
func TestCreepEvery(t *testing.T) {
	for _, c := range []struct{ p, k int }{{8, 1}, {128, 1}, {129, 4}, {256, 4}, {300, 9}, {500, 16}} {
		if got := creepEvery(c.p); got != c.k {
			t.Errorf("p = %d: every %d frames, want %d", c.p, got, c.k)
		}
	}
	const p = 200 // every 4 frames
	src := newGaussSource(89, blockCorrelation(p, 20, 0.81))
	cfg := Config{Period: time.Second, HalfLife: 100 * time.Hour, WarmUp: 400, Creep: true,
		Modes: modes.Config{Count: 3, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 20}}}}
	tr, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	var sc, ev Score
	x := make([]float64, p)
	var prev float64
	changed := 0
	for k := 0; k < 1200; k++ {
		src.frame(x)
		if k > 600 {
			if err := tr.Evaluate(&ev, x, nil); err != nil {
				t.Fatal(err)
			}
		}
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		if k > 601 {
			if sc.Creep != prev {
				changed++
				if sc.Frame%4 != 0 {
					t.Fatalf("frame %d: creep statistic changed off its evaluation frames (%v → %v, next refresh %d)", sc.Frame, prev, sc.Creep, sc.NextRefresh)
				}
			}
		}
		prev = sc.Creep
	}
	if changed < 100 {
		t.Errorf("statistic changed in %d of 600 frames, want about 150 (every 4th)", changed)
	}
	// Evaluate between Steps changed nothing: a fresh run without it
	// gives the same last value.
	src2 := newGaussSource(89, blockCorrelation(p, 20, 0.81))
	tr2, _ := New(p, cfg)
	var sc2 Score
	for k := 0; k < 1200; k++ {
		tr2.Step(&sc2, src2.frame(x), nil)
	}
	if math.Float64bits(sc2.Creep) != math.Float64bits(sc.Creep) {
		t.Errorf("with Evaluate between Steps %v, without %v", sc.Creep, sc2.Creep)
	}
}

// Configuration: the weight must lie in (0, 1].
func TestCreepConfig(t *testing.T) {
	checkWeightConfig(t, "CreepLambda", func(lam float64) Config { return Config{Creep: true, CreepLambda: lam} },
		func(c Config) float64 { return c.CreepLambda }, DefaultCreepLambda)
}
