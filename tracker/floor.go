package tracker

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// SetScaleFloor sets the smallest standard deviation each channel is
// standardized with, in channel units (sd nil or all zero: none; else
// len P(), each ≥ 0 and finite). A channel i whose EW variance σᵢ² is
// below sᵢ² = sdᵢ² is scored as if it carried an independent noise that
// lifts its variance to sᵢ²:
//
//	zᵢ = (xᵢ − μᵢ)/max(σᵢ, sdᵢ)
//	Aᵢⱼ = Cᵢⱼ/(max(σᵢ, sdᵢ)·max(σⱼ, sdⱼ)) (i ≠ j),  Aᵢᵢ = 1
//
// so its correlations shrink by σᵢ/sdᵢ and the added variance falls in
// the residual. The expected values and bands (Contribution) and the
// learning reconstructions are returned to channel units with the same
// scale. For a reading of resolution q (quantisation step) the floor is
// at least the standard deviation of its quantisation noise, q/√12
// (Widrow's quantisation model: Widrow & Kollár 2008, Quantization
// Noise, ch. 4; from memory): a reading cannot be known better than its
// resolution, and a nearly constant quantised channel would otherwise
// make one step many standard deviations.
//
// The standardization uses the floor from the next frame on; the
// correlation A and the modes and limits from the next refresh
// (Refresh). The floor is not part of a checkpoint: set it again, with the
// same values, after UnmarshalBinary (the checkpoint's A was formed with
// the floor in force at its last refresh). Grow gives new channels no
// floor. SetScaleFloor panics if len(sd) ≠ P() (programmer error) and
// ignores entries that are not finite and positive.
func (t *Tracker) SetScaleFloor(sd []float64) {
	if sd == nil {
		t.floor = nil
		return
	}
	if len(sd) != t.p {
		panic("tracker: SetScaleFloor: length differs from the channel count")
	}
	any := false
	for _, s := range sd {
		if s > 0 && !math.IsInf(s, 0) {
			any = true
		}
	}
	if !any {
		t.floor = nil
		return
	}
	if len(t.floor) != t.p {
		t.floor = make([]float64, t.p)
	}
	for i, s := range sd {
		t.floor[i] = 0
		if s > 0 && !math.IsInf(s, 0) {
			t.floor[i] = s * s
		}
	}
}

// ScaleFloor returns the floor of channel i's standard deviation set by
// SetScaleFloor (0: none).
func (t *Tracker) ScaleFloor(i int) float64 {
	if t.floor == nil {
		return 0
	}
	return math.Sqrt(t.floor[i])
}

// scaleVar returns the variance channel i is standardized with: its EW
// variance, raised to the floor (SetScaleFloor).
func (t *Tracker) scaleVar(i int) float64 {
	v := t.ew.vari[i]
	if t.floor != nil && v < t.floor[i] {
		return t.floor[i]
	}
	return v
}

// corrTo writes the correlation A of the standardized channels into dst
// (p × p; see SetScaleFloor; without a floor, EW.CorrTo).
func (t *Tracker) corrTo(dst *mat.SymDense, include []bool) {
	t.ew.CorrTo(dst, include)
	if t.floor == nil {
		return
	}
	// A of the raw variances, rescaled: Aᵢⱼ·σᵢσⱼ/(sᵢsⱼ), diagonal kept at 1.
	e, n := t.ew, t.p
	raw := dst.RawSymmetric()
	r := e.s // 1/σᵢ from CorrTo, reused as the ratio σᵢ/sᵢ
	for i := 0; i < n; i++ {
		c := e.cov.Data[i*n+i]
		if r[i] == 0 || !(c < t.floor[i]) {
			r[i] = 1
			continue
		}
		r[i] = math.Sqrt(c / t.floor[i])
	}
	for i := 0; i < n; i++ {
		d := raw.Data[i*raw.Stride : i*raw.Stride+n]
		for j := i + 1; j < n; j++ {
			d[j] *= r[i] * r[j]
		}
	}
}
