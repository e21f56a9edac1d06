package tracker

import (
	"bytes"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// levelBaseline returns a seeded source of the two-factor channels (two
// blocks of four, correlation 0.81 within a block) and a tracker fitted as
// a baseline on n of its frames, with level steps over windows of k
// frames.
func levelBaseline(t *testing.T, seed uint64, k, n int) (*gaussSource, *Tracker) {
	t.Helper()
	src := newGaussSource(seed, twoFactorCorr())
	cfg := Config{Period: time.Second, Residual: true, LevelStep: k, Modes: modes.Config{Count: 2}}
	tr, err := New(8, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := tr.Fit(src.frames(n, 8)); err != nil {
		t.Fatal(err)
	}
	return src, tr
}

// A step of δ standard deviations in channel j moves the standardized
// conditional residual of channel i by Ωᵢⱼδ/√Ωᵢᵢ once the step fills the
// later window: √Ωⱼⱼ·δ for j itself. Ω here is the inverse of the
// population correlation (plus the ridge ε_R), from gonum's general
// inverse, an outside reference for the tracker's triangular solves; for
// the equicorrelated block of four at ρ = 0.81 (without the ridge) it is
// the closed form (1/(1 − ρ))(I − ρ/(1 + 3ρ)·J): Ωⱼⱼ = 4.0203,
// Ωᵢⱼ = −1.2429 (the inverse of an equicorrelation matrix, Graybill 1983,
// Matrices with Applications in Statistics; from memory). The step of
// the shifted channel is the largest (|Ωᵢⱼ| ≤ √(ΩᵢᵢΩⱼⱼ)).
func TestLevelStepOneChannel(t *testing.T) {
	const k, j, delta, trials = 200, 1, 2.0, 12
	src, tr := levelBaseline(t, 91, k, 20000)
	corr := twoFactorCorr()
	ridged := mat.NewSymDense(8, nil)
	for a := 0; a < 8; a++ {
		for b := a; b < 8; b++ {
			v := corr.At(a, b)
			if a == b {
				v += DefaultResidualRidge
			}
			ridged.SetSym(a, b, v)
		}
	}
	var om, om0 mat.Dense
	if err := om.Inverse(ridged); err != nil {
		t.Fatal(err)
	}
	if err := om0.Inverse(corr); err != nil {
		t.Fatal(err)
	}
	if d, o := om0.At(j, j), om0.At(0, j); math.Abs(d-4.0203) > 1e-4 || math.Abs(o+1.2429) > 1e-4 {
		t.Fatalf("Ωjj %.4f, Ωij %.4f; closed form 4.0203, −1.2429", d, o)
	}
	want := make([]float64, 8)
	for i := range want {
		want[i] = om.At(i, j) * delta / math.Sqrt(om.At(i, i))
	}
	var sc Score
	x := make([]float64, 8)
	got, mean := make([]float64, 8), make([]float64, 8)
	meanStep := 0.0
	for trial := 0; trial < trials; trial++ {
		tr.ResetLevelSteps()
		var before, after float64 // the shifted channel's window means, computed here
		for f := 0; f < 3*k; f++ {
			src.frame(x)
			if f >= 2*k {
				x[j] += delta * src.sd[j]
			}
			switch {
			case f >= 2*k:
				after += x[j] / k
			case f >= k:
				before += x[j] / k
			}
			if err := tr.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
		}
		// LevelStepOf in the channel's unit: the window means are the
		// readings' own (the baseline does not move its means), the
		// unexplained step σⱼsⱼ/√Ωⱼⱼ.
		b, a, st, ok := tr.LevelStepOf(j)
		if !ok || math.Abs(b-before) > 1e-9*src.sd[j] || math.Abs(a-after) > 1e-9*src.sd[j] {
			t.Errorf("trial %d: LevelStepOf(%d) = %v → %v (ok %v), the readings' window means %v → %v", trial, j, b, a, ok, before, after)
		}
		meanStep += st / trials
		if !tr.LevelStepsTo(got) {
			t.Fatal("no level steps with a full ring")
		}
		best := 0
		for i := range got {
			mean[i] += got[i] / trials
			if math.Abs(got[i]) > math.Abs(got[best]) {
				best = i
			}
		}
		if best != j {
			t.Errorf("trial %d: largest step in channel %d, not the shifted %d: %.3f", trial, best, j, got)
		}
	}
	// The unexplained step of the shifted channel is its reading's step,
	// δ·sd (the others do not move with it): each trial's has standard
	// deviation sd·√(2/k)/√Ωⱼⱼ ≈ 0.05·sd, the mean of 12 0.014·sd.
	if want := delta * src.sd[j]; math.Abs(meanStep-want) > 0.06*src.sd[j] {
		t.Errorf("mean unexplained step %.4f, want δ·sd = %.4f", meanStep, want)
	}
	if _, _, _, ok := tr.LevelStepOf(8); ok {
		t.Error("LevelStepOf(8) of 8 channels: ok")
	}
	// Each trial's sᵢ has standard deviation √(2/k) = 0.1 about its mean;
	// the mean of 12, 0.029.
	for i := range mean {
		if math.Abs(mean[i]-want[i]) > 0.12 {
			t.Errorf("channel %d: mean step %.3f, Ωᵢⱼδ/√Ωᵢᵢ = %.3f", i, mean[i], want[i])
		}
	}
}

// In control with independent frames the difference of two window means
// of k frames has variance 2/k (Var(z̄ᴬ − z̄ᴮ) = 2A/k), and so the
// standardized conditional residual's, (ΩAΩ)ᵢᵢ/Ωᵢᵢ·2/k = 2/k: every
// channel's mean of sᵢ² is 2/k (basic sampling; the two-window test's null
// variance, Basseville & Nikiforov 1993, ch. 2).
func TestLevelStepInControlVariance(t *testing.T) {
	const k, n = 20, 60000
	src, tr := levelBaseline(t, 93, k, 20000)
	var sc Score
	x := make([]float64, 8)
	s := make([]float64, 8)
	sum := make([]float64, 8)
	m := 0
	for f := 0; f < n; f++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		if !tr.LevelStepsTo(s) {
			continue
		}
		m++
		for i, v := range s {
			sum[i] += v * v
		}
	}
	for i := range sum {
		if got := sum[i] / float64(m); math.Abs(got-2.0/k) > 0.1*2/k {
			t.Errorf("channel %d: mean s² %.4f, want 2/k = %.4f", i, got, 2.0/k)
		}
	}
}

// The steps are valid only once the ring holds 2k frames: after a start,
// ResetLevelSteps and ResetSmoothing; a channel missing in the windows
// has no step until it has been read for 2k frames in a row.
func TestLevelStepResetAndMissing(t *testing.T) {
	const k = 10
	src, tr := levelBaseline(t, 95, k, 5000)
	var sc Score
	x := make([]float64, 8)
	s := make([]float64, 8)
	step := func() bool {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		return tr.LevelStepsTo(s)
	}
	for _, reset := range []func(){tr.ResetLevelSteps, tr.ResetSmoothing} {
		for f := 0; f < 3*k; f++ {
			step()
		}
		reset()
		for f := 1; f < 2*k; f++ {
			if step() {
				t.Fatalf("level steps valid %d frames after a reset (need %d)", f, 2*k)
			}
		}
		if !step() {
			t.Fatalf("no level steps %d frames after a reset", 2*k)
		}
	}
	src.frame(x)
	x[3] = math.NaN()
	if err := tr.Step(&sc, x, nil); err != nil {
		t.Fatal(err)
	}
	for f := 1; f < 2*k; f++ {
		if step(); s[3] != 0 {
			t.Fatalf("channel 3 has a step %g %d frames after it was missing", s[3], f)
		}
	}
	if step(); s[3] == 0 {
		t.Fatal("channel 3 has no step 2k frames after it was missing")
	}
	if tr2, _ := New(8, Config{Period: time.Second, Residual: true}); tr2.LevelStepsTo(s) {
		t.Fatal("level steps without Config.LevelStep")
	}
	if _, err := New(8, Config{Period: time.Second, LevelStep: MaxLevelStepFrames + 1}); err == nil {
		t.Fatal("LevelStep over MaxLevelStepFrames accepted")
	}
}

// Step with level steps allocates nothing, and the sums formed again from
// the ring every 2k frames agree with the running ones.
func TestLevelStepAllocs(t *testing.T) {
	const k = 7
	src, tr := levelBaseline(t, 97, k, 5000)
	var sc Score
	x := make([]float64, 8)
	frames := src.frames(64, 8)
	f := 0
	if a := testing.AllocsPerRun(200, func() {
		if err := tr.Step(&sc, frames[f%len(frames)], nil); err != nil {
			t.Fatal(err)
		}
		f++
	}); a != 0 {
		t.Errorf("%v allocations per Step with level steps", a)
	}
	ls := tr.lst
	for f := 0; f < 2*k+3; f++ { // off the forming frame
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
	}
	for i := 0; i < 8; i++ {
		var a, b float64
		for r := 0; r < 2*k; r++ {
			v := ls.ring[((ls.head+r)%(2*k))*8+i]
			if r < k {
				b += v
			} else {
				a += v
			}
		}
		if math.Abs(a-ls.sumA[i]) > 1e-9 || math.Abs(b-ls.sumB[i]) > 1e-9 {
			t.Errorf("channel %d: sums %g, %g; from the ring %g, %g", i, ls.sumA[i], ls.sumB[i], a, b)
		}
	}
}

// The level steps' window ring travels in the checkpoint (version 9): a
// tracker restored from a checkpoint taken mid-stream gives bit-identical
// level steps from its first frame on; the same checkpoint written as
// version 8 (no level section) restores an empty ring, whose steps are not
// valid at once; a checkpoint with a non-finite ring value or a window
// beyond MaxLevelStepFrames is refused.
func TestCheckpointLevelSteps(t *testing.T) {
	const p, k = 9, 12
	cfg := stateCheckpointConfig()
	cfg.Residual, cfg.LevelStep = true, k
	tr, src, ck := steppedTracker(t, p, cfg, 317)
	xs := src.frames(3*k, p)
	steps := func(a *Tracker) [][]float64 {
		var out [][]float64
		var sc Score
		for _, x := range xs {
			if err := a.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			s := make([]float64, p)
			if !a.LevelStepsTo(s) {
				s = nil
			}
			out = append(out, s)
		}
		return out
	}
	want := steps(tr)
	if want[0] == nil {
		t.Fatal("no level steps right after the checkpoint: the test cannot see the ring")
	}
	got := steps(restoreTracker(t, p, cfg, ck))
	for f := range want {
		for i := range want[f] {
			if got[f] == nil || math.Float64bits(got[f][i]) != math.Float64bits(want[f][i]) {
				t.Fatalf("frame %d after restore: level steps %v, uninterrupted %v", f, got[f], want[f])
			}
		}
	}
	mb, err := tr.ms.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	sec := 1 + 4*4 + 8*(2*k*p+2*p) + 4*p + 4 + 8*p
	at := len(ck) - 4 - len(mb) - 4 - sec
	if ck[at] != 1 || binary.LittleEndian.Uint32(ck[at+1:]) != k {
		t.Fatalf("level flag %d, window %d at byte %d; want 1, %d", ck[at], binary.LittleEndian.Uint32(ck[at+1:]), at, k)
	}
	if v8 := steps(restoreTracker(t, p, cfg, asVersion(ck, 8, at, sec))); v8[0] != nil {
		t.Error("a version 8 checkpoint (no level section) gave level steps at once")
	}
	refusesFloat(t, p, cfg, ck, at+1+4*4+8*5, math.NaN(), "NaN in the ring")
	bad := bytes.Clone(ck[:len(ck)-4])
	binary.LittleEndian.PutUint32(bad[at+1:], MaxLevelStepFrames+1)
	bad = binary.LittleEndian.AppendUint32(bad, crc32.ChecksumIEEE(bad))
	if nt, _ := New(p, cfg); !errors.Is(nt.UnmarshalBinary(bad), ErrCheckpoint) {
		t.Error("a level window over MaxLevelStepFrames was not refused")
	}
}
