package tracker

import (
	"math"
	"math/rand/v2"
	"testing"
)

// cholUpper gives the same bits with the panel kernel (panelRowAVX2, each
// panel row updated once by all the rows above it and scaled in the same
// pass) and, with AVX-512F, the trailing updates of groups of panels in
// one pass (gerUpdNAVX512), as with one gonum Axpy per pair of panel
// rows, one Scal per row and one trailing update per panel, on seeded
// correlation-like matrices with zero rows and columns (channels out of
// the model) and a ridge, for sizes around the panel width, whole and
// partial groups of panels, and the kernels' 16-, 8- and 4-value blocks;
// skipped without AVX2.
func TestCholUpperPanelKernelSameBits(t *testing.T) {
	if !hasPanelKernel {
		t.Skip("no AVX2")
	}
	rng := rand.New(rand.NewPCG(3, 31))
	for _, n := range []int{1, 3, 4, 5, 15, 16, 17, 33, 48, 64, 65, 80, 101, 203, 262, 500} {
		lda := n + 3
		// A = GGᵀ/m, rows of G random, then channels 2 and n−1 zeroed.
		m := n + 10
		g := make([]float64, n*m)
		for i := range g {
			g[i] = rng.NormFloat64()
		}
		a := make([]float64, n*lda)
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				s := 0.0
				for l := 0; l < m; l++ {
					s += g[i*m+l] * g[j*m+l]
				}
				a[i*lda+j] = s / float64(m)
			}
		}
		for _, z := range []int{2, n - 1} {
			if z >= n || n < 4 {
				continue
			}
			for j := 0; j < n; j++ {
				a[min(z, j)*lda+max(z, j)] = 0
			}
		}
		for i := 0; i < n; i++ {
			a[i*lda+i] += 1e-4
		}
		ref := append([]float64(nil), a...)
		got := append([]float64(nil), a...)
		multi := hasMultiPanel
		hasPanelKernel, hasMultiPanel = false, false
		okRef := cholUpper(ref, n, lda, make([]float64, n*cholBlock))
		hasPanelKernel, hasMultiPanel = true, multi
		okGot := cholUpper(got, n, lda, make([]float64, n*cholBlock))
		if !okRef || !okGot {
			t.Fatalf("n=%d: not positive definite (%v, %v)", n, okRef, okGot)
		}
		for i := 0; i < n; i++ {
			for j := i; j < n; j++ {
				if math.Float64bits(ref[i*lda+j]) != math.Float64bits(got[i*lda+j]) {
					t.Fatalf("n=%d: U[%d,%d] Axpy %v, panel kernel %v", n, i, j, ref[i*lda+j], got[i*lda+j])
				}
			}
			for j := n; j < lda; j++ {
				if got[i*lda+j] != 0 {
					t.Fatalf("n=%d: padding [%d,%d] written", n, i, j)
				}
			}
		}
	}
}

// tailColumns gives the bits of one scalar dot product per value (the
// form it replaced: for each value, s += a[l][i+r]·a[l][j] over the panel
// rows, then a −= s), for 1 to 7 columns and panels of 1 to 16 rows.
func TestTailColumnsSameBits(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 4))
	const n, lda = 40, 43
	for _, k := range []int{1, 7, 16} {
		for m := 1; m < 8; m++ {
			a := make([]float64, n*lda)
			for x := range a {
				a[x] = rng.NormFloat64()
			}
			ref := append([]float64(nil), a...)
			k0, k1, i := 2, 2+k, 20
			j0 := n - m
			for j := j0; j < n; j++ {
				for r := 0; r < 4; r++ {
					s := 0.0
					for l := k0; l < k1; l++ {
						s += ref[l*lda+i+r] * ref[l*lda+j]
					}
					ref[(i+r)*lda+j] -= s
				}
			}
			tailColumns(a, lda, n, k0, k1, i, j0)
			for x := range a {
				if math.Float64bits(a[x]) != math.Float64bits(ref[x]) {
					t.Fatalf("k=%d m=%d: value %d: dot form %v, tailColumns %v", k, m, x, ref[x], a[x])
				}
			}
		}
	}
}

// resStat.forward gives the same bits with eight rows of L per pass
// (dotLanes8Packed on the packed copy of L, the lane sums carried over the
// next four values) as with rowKernel's four: y = L⁻¹z and ‖y‖², for sizes
// around the blocks of 4 and 8, with a channel out of the model (zero row
// and column of A, zero z) and exact zeros in z.
func TestForwardLanesSameBits(t *testing.T) {
	if !hasLaneKernel {
		t.Skip("no AVX2")
	}
	for _, p := range []int{1, 4, 7, 8, 9, 12, 15, 16, 17, 31, 64, 203, 500} {
		rng := rand.New(rand.NewPCG(uint64(p), 53))
		s := randomCov(rng, p, 5)
		if p > 5 {
			for j := 0; j < p; j++ {
				s.SetSym(5, j, 0)
			}
		}
		cfg := Config{Residual: true, ResidualRidge: DefaultResidualRidge, Alpha: 0.01, VarianceLambda: DefaultVarianceLambda}
		rs := newResStat(p, &cfg)
		if !factorLower(rs.gens[0].l, rs.gens[0].pk, rs.panel, s.RawSymmetric(), p, rs.ridge) {
			t.Fatalf("p=%d: not positive definite", p)
		}
		for trial := 0; trial < 4; trial++ {
			z := make([]float64, p)
			for i := range z {
				if rng.IntN(7) > 0 {
					z[i] = rng.NormFloat64()
				}
			}
			if p > 5 {
				z[5] = 0
			}
			hasLaneKernel = false
			qRef := rs.forward(z)
			yRef := append([]float64(nil), rs.zb[:p]...)
			hasLaneKernel = true
			q := rs.forward(z)
			if math.Float64bits(q) != math.Float64bits(qRef) {
				t.Fatalf("p=%d: ‖y‖² %v, four rows per pass %v", p, q, qRef)
			}
			for i := range yRef {
				if math.Float64bits(rs.zb[i]) != math.Float64bits(yRef[i]) {
					t.Fatalf("p=%d: y[%d] %v, four rows per pass %v", p, i, rs.zb[i], yRef[i])
				}
			}
		}
	}
}

// rowKernel gives the same bits with four columns per pass
// (syrkRow4x4AVX512, two columns' accumulators side by side in each 8-wide
// register) as with syrkRow4AVX2's two, for 2 to 13 columns, lengths 4 to
// 64 and the α, β of its callers (1, 0; −1, 1; a decay) and others;
// skipped without AVX-512F.
func TestRowKernelQuadSameBits(t *testing.T) {
	if !hasQuadKernel {
		t.Skip("no AVX-512F")
	}
	rng := rand.New(rand.NewPCG(9, 17))
	for _, k := range []int{4, 8, 12, 64} {
		for ncol := 2; ncol <= 13; ncol++ {
			for _, ab := range [][2]float64{{1, 0}, {-1, 1}, {1, 0.9993}, {0.37, -1.25}} {
				const lda, ldc = 70, 19
				a := make([]float64, 4*lda)
				b := make([]float64, ncol*lda)
				c := make([]float64, 4*ldc)
				for i := range a {
					a[i] = rng.NormFloat64()
				}
				for i := range b {
					b[i] = rng.NormFloat64()
				}
				for i := range c {
					c[i] = rng.NormFloat64()
				}
				ref := append([]float64(nil), c...)
				hasQuadKernel = false
				okRef := rowKernel(a, lda, k, b, ncol, ref, ldc, ab[0], ab[1])
				hasQuadKernel = true
				ok := rowKernel(a, lda, k, b, ncol, c, ldc, ab[0], ab[1])
				if !ok || !okRef {
					t.Fatal("kernel not run")
				}
				for i := range c {
					if math.Float64bits(c[i]) != math.Float64bits(ref[i]) {
						t.Fatalf("k=%d ncol=%d α,β=%v: c[%d] two columns %v, four %v", k, ncol, ab, i, ref[i], c[i])
					}
				}
			}
		}
	}
}
