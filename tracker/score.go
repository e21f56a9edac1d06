package tracker

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// work is the per-frame scratch of the scoring path (sized in New).
type work struct {
	z, e, dz, rbc, spec, t2c, imp []float64 // p
	t, q, y                       []float64 // maxR
	miss                          []int     // current missing pattern
}

func newWork(p, maxR int) *work {
	return &work{
		z: make([]float64, p), e: make([]float64, p), dz: make([]float64, p),
		rbc: make([]float64, p), spec: make([]float64, p), t2c: make([]float64, p),
		imp: make([]float64, p),
		t:   make([]float64, maxR), q: make([]float64, maxR), y: make([]float64, maxR),
		miss: make([]int, 0, p),
	}
}

// impute replaces the missing entries of z (which must be zero on entry) by
// their conditional expectation given the observed ones, ẑ_m = H z.
func (m *model) impute(z []float64, pt *pattern, tmp []float64) {
	p := m.p
	for x := range pt.miss {
		h := pt.h[x*p : (x+1)*p]
		s := 0.0
		for j, v := range h {
			s += v * z[j]
		}
		tmp[x] = s
	}
	for x, i := range pt.miss {
		z[i] = tmp[x]
	}
}

// scoreZ scores the standardized (and imputed) frame in w.z under pattern
// pt: T², SPE, φ and the per-channel SPE contributions e², T² contributions
// zᵢ(D'z)ᵢ and RBCs. All loops are O(p·r).
func (m *model) scoreZ(w *work, pt *pattern, rbc Index) (t2, spe, phi float64) {
	p, R, r, rq := m.p, m.maxR, m.r, m.rq
	z := w.z
	// t = Pᵀz, q = Qᵀz
	for j := 0; j < r; j++ {
		w.t[j], w.q[j] = 0, 0
	}
	for i := 0; i < p; i++ {
		zi := z[i]
		if zi == 0 {
			continue
		}
		pr := m.pl[i*R : i*R+r]
		qr := m.q[i*R : i*R+rq]
		for j, v := range pr {
			w.t[j] += v * zi
		}
		for j, v := range qr {
			w.q[j] += v * zi
		}
	}
	// y = M'⁺t, T² = tᵀy
	t2 = 0
	for a := 0; a < r; a++ {
		s := 0.0
		for b := 0; b < r; b++ {
			s += pt.minv[a*R+b] * w.t[b]
		}
		w.y[a] = s
		t2 += w.t[a] * s
	}
	tau2, delta2 := pt.t2Lim, pt.speLim
	// The RBC numerator is (Mz)ᵢ with M = Φ = D/τ² + C̃/δ² or M = C̃.
	cd, ce := 1/tau2, 1/delta2
	if rbc == IndexSPE {
		cd, ce = 0, 1
	}
	spe = 0
	y := w.y[:r]
	qv := w.q[:rq]
	for i := 0; i < p; i++ {
		pr := m.pl[i*R : i*R+r]
		qr := m.q[i*R : i*R+rq]
		dz := 0.0
		for j, v := range pr {
			dz += v * y[j]
		}
		zi := z[i]
		e := zi
		for j, v := range qr {
			e -= v * qv[j]
		}
		w.dz[i] = dz
		w.e[i] = e
		w.spec[i] = e * e
		w.t2c[i] = zi * dz
		spe += e * e
		v := cd*dz + ce*e
		w.rbc[i] = v * v * pt.rbcInv[i]
	}
	phi = spe/delta2 + t2/tau2
	return t2, spe, phi
}

// lookupPattern returns the cached pattern for the missing set w.miss,
// computing it (and, at the first incomplete frame after a refresh, the
// regularised precision matrix Ω = (A + εI)⁻¹) when it is new.
func (m *model) lookupPattern(miss []int, ls *limitSpec, ridge float64, cacheMax int) (*pattern, error) {
	if len(miss) == 0 {
		return m.base, nil
	}
	for _, pt := range m.cache {
		if slices.Equal(pt.miss, miss) {
			return pt, nil
		}
	}
	if !m.omegaOK {
		if err := m.computeOmega(ridge); err != nil {
			return nil, err
		}
	}
	pt := m.newPattern(slices.Clone(miss))
	if err := m.conditional(pt, ridge); err != nil {
		return nil, err
	}
	m.computePattern(pt, ls)
	if len(m.cache) < cacheMax {
		m.cache = append(m.cache, pt)
	} else if cacheMax > 0 {
		m.cache[m.next] = pt
		m.next = (m.next + 1) % cacheMax
	}
	return pt, nil
}

// computeOmega forms Ω = (A + εI)⁻¹ by Cholesky: O(p³), once per refresh and
// only when an incomplete frame arrives.
func (m *model) computeOmega(ridge float64) error {
	p := m.p
	reg := mat.NewSymDense(p, nil)
	reg.CopySym(m.a)
	for i := 0; i < p; i++ {
		reg.SetSym(i, i, reg.At(i, i)+ridge)
	}
	var ch mat.Cholesky
	if !ch.Factorize(reg) {
		return fmt.Errorf("tracker: missing-data model: correlation + %g·I is not positive definite", ridge)
	}
	if m.omega == nil {
		m.omega = mat.NewSymDense(p, nil)
	}
	if err := ch.InverseTo(m.omega); err != nil {
		return fmt.Errorf("tracker: missing-data model: %w", err)
	}
	m.omegaOK = true
	return nil
}

// conditional fills the conditional-expectation operator H and the
// conditional covariance K of the missing channels given the observed ones,
// under the regularised model A + εI (Gaussian conditioning via the
// precision matrix):
//
//	K = (Ω_mm)⁻¹ − εI,   ẑ_m = −(Ω_mm)⁻¹ Ω_mo z_o
//
// O(|m|³ + |m|²·p).
func (m *model) conditional(pt *pattern, ridge float64) error {
	k, p := len(pt.miss), m.p
	om := mat.NewSymDense(k, nil)
	for x, i := range pt.miss {
		for y := x; y < k; y++ {
			om.SetSym(x, y, m.omega.At(i, pt.miss[y]))
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(om) {
		return fmt.Errorf("tracker: missing-data model: precision block not positive definite")
	}
	kinv := mat.NewSymDense(k, nil)
	if err := ch.InverseTo(kinv); err != nil {
		return fmt.Errorf("tracker: missing-data model: %w", err)
	}
	for x := 0; x < k; x++ {
		for y := 0; y < k; y++ {
			v := kinv.At(x, y)
			if x == y {
				v = math.Max(v-ridge, 0)
			}
			pt.kc[x*k+y] = v
		}
	}
	// H = −K̃ Ω_{m,:} (K̃ = (Ω_mm)⁻¹), zero on the missing columns.
	for x := 0; x < k; x++ {
		h := pt.h[x*p : (x+1)*p]
		for j := 0; j < p; j++ {
			s := 0.0
			for y, iy := range pt.miss {
				s += kinv.At(x, y) * m.omega.At(iy, j)
			}
			h[j] = -s
		}
		for _, i := range pt.miss {
			h[i] = 0
		}
	}
	return nil
}
