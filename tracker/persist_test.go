package tracker

import (
	"bytes"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// relPlant is a seeded invented unit of six channels: two slow drivers
// u, v (AR(1), time constant 200 frames, unit variance); x0 and x1 hold
// u tightly (noise 0.05: the tight relation x0 − x1), x2 = v, x3 = u + v,
// x4 white noise, and x5 an independent channel that wanders slowly
// (AR(1), time constant 300 frames, unit variance) with little noise.
type relPlant struct {
	rng     *rand.Rand
	u, v, w float64
}

const relP = 6

func newRelPlant(seed uint64) *relPlant {
	return &relPlant{rng: rand.New(rand.NewPCG(seed, 0x9e3779b97f4a7c15))}
}

func (s *relPlant) frame(x []float64) []float64 {
	ar := func(y, tau float64) float64 {
		a := math.Exp(-1 / tau)
		return a*y + math.Sqrt(1-a*a)*s.rng.NormFloat64()
	}
	s.u, s.v, s.w = ar(s.u, 200), ar(s.v, 200), ar(s.w, 300)
	n := s.rng.NormFloat64
	x[0] = s.u + 0.05*n()
	x[1] = s.u + 0.05*n()
	x[2] = s.v + 0.1*n()
	x[3] = s.u + s.v + 0.1*n()
	x[4] = n()
	x[5] = s.w + 0.05*n()
	return x
}

// condVar is channel i's conditional variance given the other channels
// under the tracker's current model, in the channel's units squared:
// σᵢ²/Ωᵢᵢ with Ω = A⁻¹ (A the model's correlation; Stats' variance σᵢ²).
func condVar(t *testing.T, tr *Tracker, i int) float64 {
	t.Helper()
	var inv mat.Dense
	if err := inv.Inverse(tr.mdl.a); err != nil {
		t.Fatal(err)
	}
	return tr.Stats().Var(i) / inv.At(i, i)
}

// fittedRel learns n normal frames of relPlant(seed) as fit does (the
// persistence weight's levels learned, every frame weighed 1), and
// returns the checkpoint, restored by the caller under the learning
// configuration to score the test frames.
func fittedRel(t *testing.T, cfg Config, seed uint64, n int) ([]byte, *relPlant) {
	t.Helper()
	fc := cfg
	fc.PersistLevelsOnly = true
	tr, err := New(relP, fc)
	if err != nil {
		t.Fatal(err)
	}
	src := newRelPlant(seed)
	var sc Score
	x := make([]float64, relP)
	for k := 0; k < n; k++ {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
	}
	ck, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	return ck, src
}

// relConfig weighs frames equally (HalfLife 0), as a fitted model goes on
// learning in replay and run.
func relConfig(persist float64) Config {
	return Config{Period: time.Second, WarmUp: 200, RefreshEvery: 64,
		Modes: modes.Config{Count: 2}, Residual: true, FlatFrames: -1, Persist: persist}
}

// TestPersistSlowDriftNotAbsorbed: the sub-threshold analogue of
// TestMaskedFaultNotLearned. After 4000 normal frames, x0 drifts off its
// tight relation to x1 by 3 of its conditional standard deviations over
// 2000 frames (most frames under the residual statistic's per-frame
// limit), then holds there for 1000, while the tracker keeps learning
// (every frame weighed equally, as a fitted model goes on learning). Without the persistence weight the model
// learns the drift: x0's conditional variance grows severalfold and the
// residual statistic decays back toward its normal level; with it (k = 3,
// a rejection point in the usual 2–4 range, Hampel et al. 1986) the
// conditional variance grows by less than a quarter as much and the
// residual statistic at the end stays higher. The same 3000 frames with a
// legitimate slow change of the wandering channel x5 instead (2 of its
// standard deviations over 2000 frames, nothing else changed) are learned
// as before: mean learning weight ≥ 0.95, and the learned mean of x5
// within 5 % of the move of the run without the weight.
func TestPersistSlowDriftNotAbsorbed(t *testing.T) {
	const seed, nFit, nDrift, nHold = 11, 4000, 2000, 1000
	ckOn, _ := fittedRel(t, relConfig(3), seed, nFit)
	ckOff, _ := fittedRel(t, relConfig(-1), seed, nFit)
	type out struct {
		cv0, cv1, resEnd, mean5, weight float64
	}
	run := func(persist float64, wander bool) out {
		ck := ckOff
		if persist > 0 {
			ck = ckOn
		}
		tr, err := New(relP, relConfig(persist))
		if err != nil {
			t.Fatal(err)
		}
		if err := tr.UnmarshalBinary(ck); err != nil {
			t.Fatal(err)
		}
		// The same test frames for every run: a fresh source after the
		// normal frames' seed.
		src := newRelPlant(seed + 1000)
		var sc Score
		x := make([]float64, relP)
		var o out
		o.cv0 = condVar(t, tr, 0)
		sd0 := math.Sqrt(o.cv0)
		var res, wsum []float64
		for k := 0; k < nDrift+nHold; k++ {
			src.frame(x)
			f := math.Min(float64(k)/nDrift, 1)
			if wander {
				x[5] += 2 * f
			} else {
				x[0] += 3 * sd0 * f
			}
			if err := tr.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			res = append(res, sc.Residual/sc.ResidualLimit)
			wsum = append(wsum, sc.LearnWeight)
		}
		o.cv1 = condVar(t, tr, 0)
		o.resEnd = median(res[len(res)-nHold:])
		o.mean5 = tr.Stats().Mean(5)
		for _, w := range wsum {
			o.weight += w / float64(len(wsum))
		}
		return o
	}
	off, on := run(-1, false), run(3, false)
	t.Logf("drift, no weight:   x0 conditional variance ×%.2f, residual/limit median over the last %d frames %.2f, mean weight %.3f", off.cv1/off.cv0, nHold, off.resEnd, off.weight)
	t.Logf("drift, persist k=3: x0 conditional variance ×%.2f, residual/limit median %.2f, mean weight %.3f", on.cv1/on.cv0, on.resEnd, on.weight)
	if off.cv1/off.cv0 < 2 {
		t.Fatalf("without the weight the drift inflated x0's conditional variance only ×%.2f: the comparison shows nothing", off.cv1/off.cv0)
	}
	if g0, g1 := off.cv1/off.cv0-1, on.cv1/on.cv0-1; g1 > g0/4 {
		t.Errorf("with the weight x0's conditional variance grew by %.2f, more than a quarter of %.2f without", g1, g0)
	}
	if on.resEnd < 1.5*off.resEnd {
		t.Errorf("residual statistic at the end %.2f of its limit with the weight, %.2f without: the drift was absorbed", on.resEnd, off.resEnd)
	}
	woff, won := run(-1, true), run(3, true)
	t.Logf("wander: learned mean of x5 %.3f without the weight, %.3f with; mean weight %.3f", woff.mean5, won.mean5, won.weight)
	if won.weight < 0.95 {
		t.Errorf("a legitimate slow change of a wandering channel was learned with mean weight %.3f", won.weight)
	}
	if d := math.Abs(won.mean5 - woff.mean5); d > 0.05*2 {
		t.Errorf("the wandering channel's learned mean differs by %.3f (of a move of 2) from the run without the weight", d)
	}
}

// TestScatterWeight checks min(1, (k/d)²), Huber's weight for scatter
// (Huber 1981, §8.4; stated from memory): the influence w·d² of a frame on
// a variance is bounded by k².
func TestScatterWeight(t *testing.T) {
	for _, c := range []struct{ d, k, want float64 }{
		{0, 3, 1}, {2.9, 3, 1}, {3, 3, 1}, {6, 3, 0.25}, {30, 3, 0.01}, {math.NaN(), 3, 1},
	} {
		if got := scatterWeight(c.d, c.k); math.Abs(got-c.want) > 1e-15 {
			t.Errorf("scatterWeight(%v, %v) = %v, want %v", c.d, c.k, got, c.want)
		}
	}
	for d := 3.0; d < 100; d *= 1.7 {
		if w := scatterWeight(d, 3); w*d*d > 9*(1+1e-12) {
			t.Errorf("influence w·d² = %v at d = %v exceeds k² = 9", w*d*d, d)
		}
	}
}

// TestPersistCheckpoint: the persistence weight's state (z̄ and the
// normal levels) goes through a checkpoint: a restored tracker learns the
// next frames with bit-identical weights; a version 5 checkpoint (the
// section dropped) restores, with different weights (the state is seen);
// a negative level is refused.
func TestPersistCheckpoint(t *testing.T) {
	cfg := relConfig(3)
	ck, _ := fittedRel(t, cfg, 7, 1500)
	src := newRelPlant(99)
	xs := make([][]float64, 400)
	for k := range xs {
		xs[k] = src.frame(make([]float64, relP))
		xs[k][0] += 0.4 * float64(k) / 400 // a slow drift, so the weight is not always 1
	}
	weights := func(ck []byte) []float64 {
		tr, err := New(relP, cfg)
		if err != nil {
			t.Fatal(err)
		}
		if err := tr.UnmarshalBinary(ck); err != nil {
			t.Fatal(err)
		}
		var sc Score
		var w []float64
		for _, x := range xs {
			if err := tr.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			w = append(w, sc.LearnWeight)
		}
		return w
	}
	// Round trip: restore, checkpoint again, restore: the same weights.
	tr, _ := New(relP, cfg)
	if err := tr.UnmarshalBinary(ck); err != nil {
		t.Fatal(err)
	}
	ck2, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(ck, ck2) {
		t.Fatal("a restored tracker writes a different checkpoint")
	}
	w1 := weights(ck)
	below := 0
	for _, w := range w1 {
		if w < 1 {
			below++
		}
	}
	if below == 0 {
		t.Fatal("no frame had a weight below 1: the test cannot see the state")
	}
	mb, err := tr.ms.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	at := len(ck) - 4 - len(mb) - 4 - 1 - 1 - (1 + 3*8*relP + 8 + 4 + 1) // the persist section (no copy of the factor: its flag 0), then the creep and level flags (0 here) and the modes
	if ck[at] != 1 {
		t.Fatalf("persist flag %d at byte %d, want 1", ck[at], at)
	}
	v5 := append(bytes.Clone(ck[:at]), ck[at+1+3*8*relP+8+4+1+1+1:len(ck)-4]...) // version 5: no persist section, no creep or level flag
	binary.LittleEndian.PutUint16(v5[4:], 5)
	v5 = binary.LittleEndian.AppendUint32(v5, crc32.ChecksumIEEE(v5))
	w0 := weights(v5)
	same := true
	for k := range w0 {
		same = same && w0[k] == w1[k]
	}
	if same {
		t.Error("a version 5 checkpoint (persist state dropped) gave the same weights: the test cannot see the state")
	}
	bad := bytes.Clone(ck[:len(ck)-4])
	binary.LittleEndian.PutUint64(bad[at+1+8*relP+8*2:], math.Float64bits(-1))
	bad = binary.LittleEndian.AppendUint32(bad, crc32.ChecksumIEEE(bad))
	nt, _ := New(relP, cfg)
	if err := nt.UnmarshalBinary(bad); !errors.Is(err, ErrCheckpoint) {
		t.Errorf("negative level: want ErrCheckpoint, got %v", err)
	}
}

// Learning with the persistence weight allocates nothing per frame, also
// while the weight is below 1.
func TestPersistStepAllocs(t *testing.T) {
	cfg := relConfig(3)
	ck, src := fittedRel(t, cfg, 5, 1500)
	tr, _ := New(relP, cfg)
	if err := tr.UnmarshalBinary(ck); err != nil {
		t.Fatal(err)
	}
	var sc Score
	x := make([]float64, relP)
	k := 0
	step := func() {
		src.frame(x)
		x[0] += 0.5 // a persistent departure of 10 conditional standard deviations
		k++
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
	}
	for range 100 {
		step()
	}
	if sc.LearnWeight >= 1 {
		t.Fatalf("weight %v: the departure is not seen", sc.LearnWeight)
	}
	if a := testing.AllocsPerRun(200, step); a != 0 {
		t.Errorf("%v allocations per Step", a)
	}
}
