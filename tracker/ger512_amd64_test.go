package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
)

// gerUpdNAVX512 gives the same bits as gerUpdAVX2 (each value summed over
// the panel rows in the same order), one call per panel, for panels of 1,
// 5 and 16 rows, one and three panels in a pass, and 16 to 64 columns;
// skipped without AVX-512F.
func TestGerUpdAVX512SameBits(t *testing.T) {
	if !hasAVX512F {
		t.Skip("no AVX-512F")
	}
	rng := rand.New(rand.NewPCG(5, 12))
	for _, kp := range []int{1, 5, 16} {
		for _, np := range []int{1, 3} {
			for _, ncol := range []int{16, 32, 48, 64} {
				gerUpdSameBits(t, rng, kp, np, ncol)
			}
		}
	}
}

// gerUpdSameBits checks gerUpdNAVX512 over np panels of kp rows against
// gerUpdAVX2 panel by panel on seeded values.
func gerUpdSameBits(t *testing.T, rng *rand.Rand, kp, np, ncol int) {
	t.Helper()
	const ld = 70
	k := kp * np
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
	for t0 := 0; t0 < k; t0 += kp {
		gerUpdAVX2(&p[t0*ld], &q[t0*ld], ld, kp, &c[0], ld, ncol)
	}
	gerUpdNAVX512(&p[0], &q[0], ld, kp, np, &c2[0], ld, ncol)
	for i := range c {
		if math.Float64bits(c[i]) != math.Float64bits(c2[i]) {
			t.Fatalf("%d×%d rows, ncol=%d: c[%d] AVX2 %v, AVX-512 %v", np, kp, ncol, i, c[i], c2[i])
		}
	}
	for x := 0; x < 4; x++ {
		for y := ncol; y < ld; y++ {
			if c2[x*ld+y] != c[x*ld+y] {
				t.Fatalf("%d×%d rows, ncol=%d: column %d past ncol written", np, kp, ncol, y)
			}
		}
	}
}
