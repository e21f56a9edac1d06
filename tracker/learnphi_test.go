package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
)

// phiZ (the learning pass's φ) gives the bits of scoreZ's T², SPE and φ,
// with every channel in a mode and with channels outside every mode (zero
// rows of P), complete and with missing channels imputed.
func TestPhiZSameBitsAsScoreZ(t *testing.T) {
	for _, p := range []int{9, 40, 131} {
		rng := rand.New(rand.NewPCG(uint64(p), 59))
		s := randomCov(rng, p, 4)
		pm := eigenLoadings(s, 3)
		for _, sparse := range []bool{false, true} {
			if sparse {
				for i := 0; i < p; i += 3 {
					for j := 0; j < 3; j++ {
						pm.Set(i, j, 0)
					}
				}
			}
			m, ls := testModel(t, s, pm, IndexCombined)
			for _, miss := range [][]int{nil, {1}, {0, 4, p - 1}} {
				pt, err := m.lookupPattern(miss, ls, 1e-6, 4)
				if err != nil {
					t.Fatal(err)
				}
				for trial := 0; trial < 5; trial++ {
					w := newWork(p, m.maxR)
					for i := range w.z {
						w.z[i] = rng.NormFloat64()
					}
					for _, i := range miss {
						w.z[i] = 0
					}
					m.impute(w.z, pt, w.imp)
					t2, spe, phi := m.scoreZ(w, pt, IndexCombined)
					t2b, speb, phib := m.phiZ(w, pt)
					for _, c := range [][2]float64{{t2, t2b}, {spe, speb}, {phi, phib}} {
						if math.Float64bits(c[0]) != math.Float64bits(c[1]) {
							t.Fatalf("p=%d sparse=%v miss=%v: scoreZ (T², SPE, φ) = (%v, %v, %v), phiZ (%v, %v, %v)",
								p, sparse, miss, t2, spe, phi, t2b, speb, phib)
						}
					}
				}
			}
		}
	}
}
