package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"

	"modewatch/tracker/modes"
)

// quantisedFrames returns n seeded frames of four channels: three analog
// channels moved by one factor (σ about 1.1 each) and a nearly constant
// reading quantised to step q = 0.01 (3.50 in 98 % of frames, one step
// off in the rest: σ about 0.0014, so one step is about 7 σ). Invented
// data.
func quantisedFrames(n int, seed uint64) [][]float64 {
	rng := rand.New(rand.NewPCG(seed, 3))
	out := make([][]float64, n)
	for k := range out {
		f := rng.NormFloat64()
		v := 3.50
		switch u := rng.Float64(); {
		case u < 0.01:
			v = 3.49
		case u < 0.02:
			v = 3.51
		}
		out[k] = []float64{10 + f + 0.4*rng.NormFloat64(), 20 + f + 0.4*rng.NormFloat64(), 5 - f + 0.4*rng.NormFloat64(), v}
	}
	return out
}

// fitWithFloor returns a one-mode tracker over the four channels of
// quantisedFrames with the scale floor set, fitted on fit.
func fitWithFloor(t *testing.T, fit [][]float64, floor []float64) *Tracker {
	t.Helper()
	tr, err := New(4, Config{Period: time.Minute, Modes: modes.Config{Count: 1}})
	if err != nil {
		t.Fatal(err)
	}
	tr.SetScaleFloor(floor)
	if err := tr.Fit(fit); err != nil {
		t.Fatal(err)
	}
	return tr
}

// TestScaleFloor: with the floor of the quantised channel at its step q
// (SetScaleFloor), the standardization and the correlation A follow the
// formulas of SetScaleFloor (hand derivation: zᵢ = (xᵢ − μᵢ)/q,
// Aᵢⱼ = Cᵢⱼ/(σⱼ·q), Aᵢᵢ = 1, the analog block unchanged), a one-step
// change stays inside every limit, and a move of ten steps is outside
// the φ limit with the quantised channel the top contributor and its
// expected value within a step of its mean. Without the floor the one
// step alone is outside the φ limit (the false alert the floor removes).
func TestScaleFloor(t *testing.T) {
	const q = 0.01
	fit := quantisedFrames(3000, 1)
	raw := fitWithFloor(t, fit, nil)
	fl := fitWithFloor(t, fit, []float64{0, 0, 0, q})
	if got := fl.ScaleFloor(3); !scalar.EqualWithinAbsOrRel(got, q, 1e-15, 1e-12) {
		t.Errorf("ScaleFloor(3) = %v, want %v", got, q)
	}
	sd := math.Sqrt(fl.ew.Var(3))
	if !(sd < q/3) {
		t.Fatalf("the quantised channel's σ = %v is not well below its step %v: the case does not test the floor", sd, q)
	}
	ar, af := raw.mdl.a, fl.mdl.a
	for i := 0; i < 4; i++ {
		for j := i; j < 4; j++ {
			want := ar.At(i, j)
			switch {
			case i == j:
				want = 1
			case j == 3:
				want *= sd / q
			}
			if got := af.At(i, j); !scalar.EqualWithinAbsOrRel(got, want, 1e-12, 1e-9) {
				t.Errorf("A[%d][%d] = %v, want %v", i, j, got, want)
			}
		}
	}
	mean := make([]float64, 4)
	fl.ew.MeanTo(mean)
	at := func(v float64) []float64 { x := append([]float64(nil), mean...); x[3] = v; return x }
	var s Score
	// One step above the mean's level.
	oneStep := at(3.51)
	if err := fl.Evaluate(&s, oneStep, nil); err != nil {
		t.Fatal(err)
	}
	wantZ := (3.51 - mean[3]) / q
	if got := fl.w.z[3]; !scalar.EqualWithinAbsOrRel(got, wantZ, 1e-12, 1e-9) {
		t.Errorf("z of one step = %v, want (x − μ)/q = %v", got, wantZ)
	}
	if s.T2 > s.T2Limit || s.SPE > s.SPELimit || s.Phi > s.PhiLimit {
		t.Errorf("one step with the floor: T² %.3g/%.3g, SPE %.3g/%.3g, φ %.3g/%.3g: want all inside", s.T2, s.T2Limit, s.SPE, s.SPELimit, s.Phi, s.PhiLimit)
	}
	if err := raw.Evaluate(&s, oneStep, nil); err != nil {
		t.Fatal(err)
	}
	if !(s.Phi > s.PhiLimit) {
		t.Errorf("one step without the floor: φ %.3g, limit %.3g: want outside (the case the floor is for)", s.Phi, s.PhiLimit)
	}
	// Ten steps.
	if err := fl.Evaluate(&s, at(3.60), nil); err != nil {
		t.Fatal(err)
	}
	if !(s.Phi > s.PhiLimit) || len(s.Contrib) == 0 || s.Contrib[0].Channel != 3 {
		t.Fatalf("ten steps with the floor: φ %.3g, limit %.3g, contributors %v: want outside, channel 3 first", s.Phi, s.PhiLimit, s.Contrib)
	}
	if c := s.Contrib[0]; math.Abs(c.Expected-mean[3]) > q || !(c.Band > 0) {
		t.Errorf("ten steps: expected %v ± %v, mean %v: want within one step of the mean", c.Expected, c.Band, mean[3])
	}
}

// TestScaleFloorOff: a nil or all-zero floor leaves the tracker as
// without one (bit-identical scores), and a floor below every channel's
// σ changes nothing either.
func TestScaleFloorOff(t *testing.T) {
	fit := quantisedFrames(1000, 2)
	x := []float64{11, 21, 4, 3.51}
	var want Score
	for k, floor := range [][]float64{nil, {0, 0, 0, 0}, {1e-6, 1e-6, 1e-6, 1e-6}} {
		tr := fitWithFloor(t, fit, floor)
		var s Score
		if err := tr.Evaluate(&s, x, nil); err != nil {
			t.Fatal(err)
		}
		if k == 0 {
			want = s
			continue
		}
		if s.T2 != want.T2 || s.SPE != want.SPE || s.Phi != want.Phi || s.PhiLimit != want.PhiLimit {
			t.Errorf("floor %v: T² %v SPE %v φ %v (limit %v), want %v %v %v (%v)", floor, s.T2, s.SPE, s.Phi, s.PhiLimit, want.T2, want.SPE, want.Phi, want.PhiLimit)
		}
	}
}
