package tracker

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"modewatch/tracker/modes"
)

// twoFactorCorr is the correlation of p = 8 channels driven by two
// independent factors, channels 0–3 by the first and 4–7 by the second,
// each with loading 0.9 and independent noise of variance 0.19: r = 0.81
// within a group, 0 across. Two modes leave p − r = 6 residual dimensions.
func twoFactorCorr() *mat.SymDense { return blockCorrelation(8, 4, 0.81) }

// mewmaBaseline returns a tracker of the two-factor channels fitted as a
// baseline on n frames of src (held fixed: every later frame is scored
// against the same model), with the MEWMA statistic at weight lam and the
// residual statistic on.
func mewmaBaseline(t *testing.T, src *gaussSource, lam float64, n int) *Tracker {
	t.Helper()
	cfg := Config{Period: time.Second, Residual: true, Mewma: true, MewmaLambda: lam, Modes: modes.Config{Count: 2}}
	tr, err := New(8, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := tr.Fit(src.frames(n, 8)); err != nil {
		t.Fatal(err)
	}
	if d := tr.ResidualDims(); d != 6 {
		t.Fatalf("%d residual dimensions, want 6", d)
	}
	return tr
}

// In control, the MEWMA statistic of independent frames has the mean of
// a χ² on the residual dimensions once z̄ has reached its asymptotic
// covariance λ/(2 − λ)·A: E[(2 − λ)/λ · z̄ᵀMz̄] = tr(M·A) = p − r, the
// dimension count of Lowry, Woodall, Champ & Rigdon (1992, Technometrics
// 34(1), 46–53), where E[Tᵀ Σ_z⁻¹ T] is the number of variables, here of
// the residual vector Mz (rank p − r, covariance MAM = M). With λ = 1 the
// statistic is the per-frame residual statistic itself.
func TestMewmaInControlMean(t *testing.T) {
	for _, lam := range []float64{0.05, 0.2} {
		src := newGaussSource(71, twoFactorCorr())
		tr := mewmaBaseline(t, src, lam, 20000)
		var sc Score
		x := make([]float64, 8)
		burn := int(10 / lam)
		vals := make([]float64, 0, 60000)
		for k := 0; k < 60000+burn; k++ {
			if err := tr.Step(&sc, src.frame(x), nil); err != nil {
				t.Fatal(err)
			}
			if k >= burn {
				vals = append(vals, sc.Mewma)
			}
		}
		mean := stat.Mean(vals, nil)
		t.Logf("λ = %v: in-control mean %.3f over %d frames (want 6)", lam, mean, len(vals))
		// Standard error: E has variance 2(p − r) and a memory of about
		// 1/λ frames, so about λn/2 independent values: 0.05 of 6 at λ = 0.05.
		if math.Abs(mean-6) > 0.05*6 {
			t.Errorf("λ = %v: mean of the in-control MEWMA statistic %.3f, want 6 (p − r) within 5 %%", lam, mean)
		}
		if want := 16.812; math.Abs(sc.MewmaLimit-want) > 1e-3 { // χ²_0.99(6), NIST/SEMATECH e-Handbook table 1.3.6.7.4
			t.Errorf("λ = %v: limit %v, want χ²_0.99(6) = %v", lam, sc.MewmaLimit, want)
		}
	}

	src := newGaussSource(72, twoFactorCorr())
	tr := mewmaBaseline(t, src, 1, 5000)
	var sc Score
	x := make([]float64, 8)
	for k := 0; k < 200; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		if math.Abs(sc.Mewma-sc.Residual) > 1e-9*(1+sc.Residual) {
			t.Fatalf("λ = 1, frame %d: MEWMA %v, residual statistic %v: want equal", k, sc.Mewma, sc.Residual)
		}
	}
}

// A shift of half a conditional standard deviation in one relation (a
// channel moving off what the others imply), held for 3000 frames, is seen
// by the MEWMA statistic (λ = 0.05) and not by SPE, both at the same
// per-frame false-alert rate of 1 % (their empirical 0.99 quantiles over
// 40000 in-control frames). Expected per-frame detection rates from the
// noncentral χ²(6) (derived: the shift adds (2 − λ)/λ · δᵀMδ ≈ 39 · 0.25
// to the MEWMA statistic, about 0.25 to SPE on a comparable scale): MEWMA
// about a third, SPE barely above 1 %.
func TestMewmaSeesSmallShift(t *testing.T) {
	corr := twoFactorCorr()
	src := newGaussSource(73, corr)
	tr := mewmaBaseline(t, src, 0.05, 20000)
	var sc Score
	x := make([]float64, 8)
	run := func(n int, shift float64) (spe, mw []float64) {
		for k := 0; k < n+200; k++ {
			src.frame(x)
			x[1] += shift
			if err := tr.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			if k >= 200 { // z̄ settled (10/λ frames)
				spe, mw = append(spe, sc.SPE), append(mw, sc.Mewma)
			}
		}
		return spe, mw
	}
	speIn, mwIn := run(40000, 0)
	q := func(v []float64) float64 {
		s := slices.Clone(v)
		slices.Sort(s)
		return stat.Quantile(0.99, stat.Empirical, s, nil)
	}
	qSPE, qMw := q(speIn), q(mwIn)

	// Half the conditional standard deviation of channel 1 given the
	// others, 1/√Ω₁₁ with Ω = A⁻¹, in its units (sd 1.5 in gaussSource).
	om, _ := refPrecision(t, corr, 0)
	shift := 0.5 * src.sd[1] / math.Sqrt(om.At(1, 1))
	speOut, mwOut := run(3000, shift)
	over := func(v []float64, lim float64) float64 {
		n := 0
		for _, x := range v {
			if x > lim {
				n++
			}
		}
		return float64(n) / float64(len(v))
	}
	rSPE, rMw := over(speOut, qSPE), over(mwOut, qMw)
	t.Logf("frames over the in-control 0.99 quantile during the shift: SPE %.3f, MEWMA %.3f", rSPE, rMw)
	if rMw < 0.2 {
		t.Errorf("MEWMA over its in-control 0.99 quantile in %.3f of the shifted frames, want ≥ 0.2", rMw)
	}
	if rSPE > 0.03 {
		t.Errorf("SPE over its in-control 0.99 quantile in %.3f of the shifted frames, want ≤ 0.03 (it should not see the shift)", rSPE)
	}
	// The MEWMA statistic leads the frame and names the shifted channel.
	wantLeader(t, &sc, 1)
}

// wantLeader checks that channel ch leads the contributors of the score
// sc of the last shifted frame.
func wantLeader(t *testing.T, sc *Score, ch int) {
	t.Helper()
	if len(sc.Contrib) == 0 || sc.Contrib[0].Channel != ch {
		t.Errorf("last shifted frame: contributors %+v, want channel %d first", sc.Contrib, ch)
	}
}

// The MEWMA statistic's smoothed frame travels in the checkpoint (version
// 5): a tracker restored mid-stream gives bit-identical MEWMA values to an
// uninterrupted one; the same state written as version 4 (no MEWMA
// section) starts again from z̄ = 0 and differs, so the comparison can
// fail; a non-finite z̄ is refused.
func TestCheckpointMewmaState(t *testing.T) {
	const p = 9
	cfg := stateCheckpointConfig()
	cfg.Mewma, cfg.MewmaLambda = true, 0.1
	ck, replay := replayCheck(t, p, cfg, 317, 300, "MEWMA statistic", func(sc *Score) bool { return sc.MewmaLimit > 0 },
		func(sc *Score) float64 { return sc.Mewma }, func(a, b float64) bool { return math.Float64bits(a) == math.Float64bits(b) })

	at := len(ck) - 4 - modesLen(t, p, cfg, ck) - 4 - 1 - 1 - 1 - (1 + 8*p) // the MEWMA section, then the persist, creep and level flags (0 here) and the modes
	if ck[at] != 1 {
		t.Fatalf("MEWMA flag %d at byte %d, want 1", ck[at], at)
	}
	// Version 4: no flag, no z̄, no persist and creep flags.
	if same, _ := replay(asVersion(ck, 4, at, 1+8*p+1+1+1)); same {
		t.Error("a version 4 checkpoint (MEWMA state dropped) gave the same MEWMA statistic: the test cannot see the state")
	}
	refusesFloat(t, p, cfg, ck, at+1+8*3, math.NaN(), "NaN in the MEWMA state")
}

// Step with the MEWMA statistic allocates nothing, also in frames whose
// contributors it ranks.
func TestMewmaStepAllocs(t *testing.T) {
	src := newGaussSource(74, twoFactorCorr())
	checkStepAllocs(t, mewmaBaseline(t, src, 0.05, 5000), src, 300, false)
}

// checkStepAllocs checks that Step of tr allocates nothing on the frames
// of src (eight channels): after warm frames in control, in control; then,
// after 300 frames with channel 1 shifted by three of its standard
// deviations (the shifted statistic ranks the contributors), shifted.
// With freeze, learning is frozen before the shift. It returns the score
// of the last shifted frame.
func checkStepAllocs(t *testing.T, tr *Tracker, src *gaussSource, warm int, freeze bool) Score {
	t.Helper()
	var sc Score
	x := make([]float64, 8)
	for k := 0; k < warm; k++ {
		tr.Step(&sc, src.frame(x), nil)
	}
	if a := testing.AllocsPerRun(200, func() { tr.Step(&sc, src.frame(x), nil) }); a != 0 {
		t.Errorf("in control: %v allocations per Step", a)
	}
	if freeze {
		tr.Freeze()
	}
	step := func() {
		src.frame(x)
		x[1] += 3 * src.sd[1]
		tr.Step(&sc, x, nil)
	}
	for k := 0; k < 300; k++ {
		step()
	}
	if a := testing.AllocsPerRun(200, step); a != 0 {
		t.Errorf("shifted: %v allocations per Step", a)
	}
	return sc
}

// Configuration: the weight must lie in (0, 1].
func TestMewmaConfig(t *testing.T) {
	checkWeightConfig(t, "MewmaLambda", func(lam float64) Config { return Config{Mewma: true, MewmaLambda: lam} },
		func(c Config) float64 { return c.MewmaLambda }, DefaultMewmaLambda)
}

// checkWeightConfig checks the configuration of a smoothed statistic's
// weight: on(λ) turns the statistic on with weight λ (0: its default),
// got reads the weight back from a tracker's Config. New refuses a weight
// outside (0, 1] with ErrConfig, naming it name in the test's errors, and
// fills in def for 0.
func checkWeightConfig(t *testing.T, name string, on func(lam float64) Config, got func(Config) float64, def float64) {
	t.Helper()
	for _, lam := range []float64{-0.1, 1.5, math.NaN()} {
		if _, err := New(4, on(lam)); !errors.Is(err, ErrConfig) {
			t.Errorf("%s %v: want ErrConfig, got %v", name, lam, err)
		}
	}
	tr, err := New(4, on(0))
	if err != nil || got(tr.Config()) != def {
		t.Errorf("default weight: %v, %v", got(tr.Config()), err)
	}
}

// BenchmarkFrameMewma measures one frame through Step with the residual
// statistic alone and with the MEWMA statistic added (its extra forward
// solve and mode scores of z̄), at p = 50 and 500, refresh every 64 frames
// amortised: compare the two in the same run.
func BenchmarkFrameMewma(b *testing.B) {
	for _, p := range []int{50, 500} {
		for _, mw := range []bool{false, true} {
			name := fmt.Sprintf("p=%d/res", p)
			if mw {
				name += "+mewma"
			}
			b.Run(name, func(b *testing.B) {
				frames := benchFrames(p, 256)
				tr, err := New(p, Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 256, Residual: true, Mewma: mw,
					Modes: modes.Config{Count: 5, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 10}}}})
				if err != nil {
					b.Fatal(err)
				}
				var sc Score
				for k := 0; k < 600; k++ {
					tr.Step(&sc, frames[k%256], nil)
				}
				b.ReportAllocs()
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					tr.Step(&sc, frames[i%256], nil)
				}
				benchSink += sc.Mewma
			})
		}
	}
}
