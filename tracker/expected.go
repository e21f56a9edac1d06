package tracker

import "math"

// BandCoverage is the coverage of the band Contribution.Band: the
// probability, under the model in control, that the band around
// Contribution.Expected holds the channel's fault-free value.
const BandCoverage = 0.95

// bandZ is the two-sided normal quantile of BandCoverage,
// Φ⁻¹((1 + 0.95)/2) = 1.959963984540054 (any normal table; common practice).
const bandZ = 1.959963984540054

// expectedOf sets c.Reading, c.Expected and c.Band for channel i of the
// frame x just scored under pattern pt (w holds the frame's scratch).
//
// The expected value is the reconstruction of channel i from the other
// channels along its own direction ξᵢ (Dunia & Qin 1998; the reconstruction
// behind the RBC of Alcalá & Qin 2009): the value zᵢ* that minimises the
// ranking index zᵀMz with the other channels held, M = Φ (default) or C̃:
//
//	zᵢ* = zᵢ − (Mz)ᵢ/Mᵢᵢ
//
// For M = A⁻¹ this is the Gaussian conditional expectation of zᵢ given the
// other channels; for the model's M it is the expectation the model's
// modes and residual subspace imply. Under a bias f on channel i alone,
// z = z⁰ + fξᵢ and zᵢ* = z⁰ᵢ − (Mz⁰)ᵢ/Mᵢᵢ does not depend on f, so the
// reconstruction error zᵢ* − z⁰ᵢ = −(Mz⁰)ᵢ/Mᵢᵢ has, with z⁰ ~ N(0, S)
// in control, mean 0 and variance
//
//	s² = (MSM)ᵢᵢ/Mᵢᵢ² = gᵢ/Mᵢᵢ,   gᵢ = RBC limit / χ²_{1−α}(1)
//
// The band is bandZ·s. Both are returned in channel units: Expected =
// μᵢ + σᵢzᵢ*, Band = bandZ·σᵢ·s with the EW mean μᵢ and standard
// deviation σᵢ the frame was standardized with. A channel without a
// finite reconstruction gets NaN for both.
func (t *Tracker) expectedOf(c *Contribution, i int, x []float64, pt *pattern) {
	c.Reading = x[i]
	c.Expected, c.Band = math.NaN(), math.NaN()
	w := t.w
	inv := pt.rbcInv[i]
	if inv == 0 || math.IsInf(pt.rbcLim[i], 0) {
		return
	}
	cd, ce := 1/pt.t2Lim, 1/pt.speLim
	if t.cfg.RBCIndex == IndexSPE {
		cd, ce = 0, 1
	}
	mz := cd*w.dz[i] + ce*w.e[i]
	zr := w.z[i] - mz*inv
	s2 := pt.rbcLim[i] / t.ls.chi1 * inv
	sd := math.Sqrt(t.scaleVar(i))
	c.Expected = t.ew.Mean(i) + sd*zr
	c.Band = bandZ * sd * math.Sqrt(math.Max(s2, 0))
}
