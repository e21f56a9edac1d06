package tracker

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// The precision rows of the missing-data model (precisionRows: blocked
// triangular solves with several right-hand sides, the AVX2/FMA kernels
// where the CPU has them) and the pattern's H and K built on them against
// gonum's Cholesky inverse of A + εI as the reference: Ω_{m,:} row by
// row, K = (Ω_mm)⁻¹ − εI and H = −(Ω_mm)⁻¹Ω_mo (Gaussian conditioning via
// the precision matrix). Sizes and sets chosen to cross the panel width
// (16) and the kernels' steps (4 right-hand sides, 8 columns) with
// remainders: p not a multiple of 16 or odd, first and last channels, runs
// of adjacent channels, |m| not a multiple of 4.
func TestPrecisionRowsBlocked(t *testing.T) {
	const ridge = 1e-6
	for _, p := range []int{9, 64, 203} {
		rng := rand.New(rand.NewPCG(uint64(p), 41))
		s := randomCov(rng, p, 5)
		m, ls := testModel(t, s, eigenLoadings(s, 3), IndexCombined)
		omega, _ := refPrecision(t, s, ridge)
		scale := 0.0
		for i := 0; i < p; i++ {
			scale = math.Max(scale, omega.At(i, i))
		}
		sets := [][]int{{0}, {p - 1}, {1, p - 2}, {3, 4, 5}}
		var every, head []int
		for i := 2; i < p; i += 9 {
			every = append(every, i)
		}
		for i := 0; i < min(17, p-1); i++ {
			head = append(head, i)
		}
		sets = append(sets, every, head)
		for _, miss := range sets {
			t.Run(fmt.Sprintf("p=%d/k=%d/first=%d", p, len(miss), miss[0]), func(t *testing.T) {
				if err := m.factorRidge(ridge); err != nil {
					t.Fatal(err)
				}
				k := len(miss)
				h := make([]float64, roundUp4(k)*p)
				for i := range h {
					h[i] = math.NaN() // every value must be written
				}
				m.precisionRows(h, miss)
				for x, i := range miss {
					for j := 0; j < p; j++ {
						if d := math.Abs(h[x*p+j] - omega.At(i, j)); !(d <= 1e-9*scale) {
							t.Fatalf("Ω[%d,%d] = %v, gonum %v", i, j, h[x*p+j], omega.At(i, j))
						}
					}
				}
				for j := k * p; j < len(h); j++ {
					if h[j] != 0 {
						t.Fatalf("padding row value %v at %d", h[j], j)
					}
				}
				// H and K of the pattern against the reference Ω.
				pt, err := m.lookupPattern(miss, ls, ridge, 0)
				if err != nil {
					t.Fatal(err)
				}
				omm := mat.NewSymDense(k, nil)
				for x, i := range miss {
					for y, j := range miss {
						omm.SetSym(x, y, omega.At(i, j))
					}
				}
				var kInv mat.Dense
				if err := kInv.Inverse(omm); err != nil {
					t.Fatal(err)
				}
				isMiss := make([]bool, p)
				for _, i := range miss {
					isMiss[i] = true
				}
				for x := range miss {
					for y := range miss {
						want := kInv.At(x, y)
						if x == y {
							want = math.Max(want-ridge, 0)
						}
						approx(t, "K", pt.kc[x*k+y], want, 1e-9, 1e-7)
					}
					for j := 0; j < p; j++ {
						want := 0.0
						if !isMiss[j] {
							for y, iy := range miss {
								want -= kInv.At(x, y) * omega.At(iy, j)
							}
						}
						approx(t, "H", pt.h[x*p+j], want, 1e-9, 1e-7)
					}
				}
			})
		}
	}
}

// factorInverse (the residual statistic's and the relation modes' factor
// and inverse; the inverse by forwardUnit) against gonum: U⁻¹ times the
// factor is the identity, and U⁻¹U⁻ᵀ equals gonum's Cholesky inverse of
// A + εI, at sizes that cross the panel width and leave a partial group of
// four rows (p = 9, 66, 203).
func TestFactorInverseAgainstGonum(t *testing.T) {
	const ridge = 1e-4
	for _, p := range []int{9, 66, 203} {
		rng := rand.New(rand.NewPCG(uint64(p), 43))
		s := randomCov(rng, p, 5)
		u := make([]float64, p*p)
		inv := make([]float64, p*p)
		for i := range inv {
			inv[i] = math.NaN() // every value must be written
		}
		if !factorInverse(u, inv, make([]float64, p*cholBlock), s.RawSymmetric(), p, ridge) {
			t.Fatalf("p=%d: not positive definite", p)
		}
		for i := 0; i < p; i++ {
			for j := 0; j < p; j++ {
				v := 0.0 // (U⁻¹U)ᵢⱼ over the upper triangles
				for k := i; k <= j; k++ {
					v += inv[i*p+k] * u[k*p+j]
				}
				want := 0.0
				if i == j {
					want = 1
				}
				if j < i && inv[i*p+j] != 0 {
					t.Fatalf("p=%d: U⁻¹[%d,%d] = %v below the diagonal", p, i, j, inv[i*p+j])
				}
				if j >= i && !(math.Abs(v-want) <= 1e-10) {
					t.Fatalf("p=%d: (U⁻¹U)[%d,%d] = %v", p, i, j, v)
				}
			}
		}
		omega, _ := refPrecision(t, s, ridge)
		for i := 0; i < p; i++ {
			for j := i; j < p; j++ {
				v := 0.0
				for k := j; k < p; k++ {
					v += inv[i*p+k] * inv[j*p+k]
				}
				approx(t, fmt.Sprintf("p=%d Ω[%d,%d]", p, i, j), v, omega.At(i, j), 1e-9, 1e-8)
			}
		}
	}
}

// The residual statistic's Ωz (omegaTimes: U⁻ᵀ and U⁻¹ products four rows
// at a time) against gonum's Cholesky inverse of A + ε_R·I times z, at
// sizes with and without a partial group of four rows (p = 9, 64, 66, 203).
func TestOmegaTimesAgainstGonum(t *testing.T) {
	for _, p := range []int{9, 64, 66, 203} {
		rng := rand.New(rand.NewPCG(uint64(p), 47))
		s := randomCov(rng, p, 5)
		m, _ := testModel(t, s, eigenLoadings(s, 3), IndexCombined)
		cfg := Config{Residual: true, ResidualRidge: DefaultResidualRidge, Alpha: 0.01, VarianceLambda: DefaultVarianceLambda}
		rs := newResStat(p, &cfg)
		rs.refresh(m, 0.01)
		if !rs.ok {
			t.Fatalf("p=%d: refresh failed", p)
		}
		_, ch := refPrecision(t, s, DefaultResidualRidge)
		for trial := 0; trial < 3; trial++ {
			z := make([]float64, p)
			for i := range z {
				z[i] = rng.NormFloat64()
			}
			var want mat.VecDense
			if err := ch.SolveVecTo(&want, mat.NewVecDense(p, z)); err != nil {
				t.Fatal(err)
			}
			v := make([]float64, p)
			rs.omegaTimes(v, z)
			scale := mat.Norm(&want, math.Inf(1))
			for i := range v {
				if d := math.Abs(v[i] - want.AtVec(i)); !(d <= 1e-9*scale) {
					t.Fatalf("p=%d: (Ωz)[%d] = %v, gonum %v", p, i, v[i], want.AtVec(i))
				}
			}
		}
	}
}

// refPrecision returns the reference precision matrix Ω = (S + εI)⁻¹ and
// the Cholesky factor of S + εI, by gonum.
func refPrecision(t *testing.T, s *mat.SymDense, ridge float64) (*mat.SymDense, *mat.Cholesky) {
	t.Helper()
	p := s.SymmetricDim()
	se := mat.NewSymDense(p, nil)
	se.CopySym(s)
	for i := 0; i < p; i++ {
		se.SetSym(i, i, se.At(i, i)+ridge)
	}
	var ch mat.Cholesky
	if !ch.Factorize(se) {
		t.Fatal("reference factor failed")
	}
	var omega mat.SymDense
	if err := ch.InverseTo(&omega); err != nil {
		t.Fatal(err)
	}
	return &omega, &ch
}
