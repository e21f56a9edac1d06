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
		// Reference: Ω = (A + εI)⁻¹ by gonum.
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
