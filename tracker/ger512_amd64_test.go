package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
)

// gerUpdAVX512 gives the same bits as gerUpdAVX2 (each value summed over
// the panel rows in the same order), for panels of 1, 5 and 16 rows and
// 16 to 64 columns; skipped without AVX-512F.
func TestGerUpdAVX512SameBits(t *testing.T) {
	if !hasAVX512F {
		t.Skip("no AVX-512F")
	}
	rng := rand.New(rand.NewPCG(5, 12))
	for _, k := range []int{1, 5, 16} {
		for _, ncol := range []int{16, 32, 48, 64} {
			const ld = 70
			p := make([]float64, k*ld)
			q := make([]float64, k*ld)
			c := make([]float64, 4*ld)
			for i := range p {
				p[i], q[i] = rng.NormFloat64(), rng.NormFloat64()
			}
			for i := range c {
				c[i] = rng.NormFloat64()
			}
			c2 := append([]float64(nil), c...)
			gerUpdAVX2(&p[0], &q[0], ld, k, &c[0], ld, ncol)
			gerUpdAVX512(&p[0], &q[0], ld, k, &c2[0], ld, ncol)
			for i := range c {
				if math.Float64bits(c[i]) != math.Float64bits(c2[i]) {
					t.Fatalf("k=%d ncol=%d: c[%d] AVX2 %v, AVX-512 %v", k, ncol, i, c[i], c2[i])
				}
			}
			for x := 0; x < 4; x++ {
				for y := ncol; y < ld; y++ {
					if c2[x*ld+y] != c[x*ld+y] {
						t.Fatalf("k=%d ncol=%d: column %d past ncol written", k, ncol, y)
					}
				}
			}
		}
	}
}
