package tracker

import (
	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// syrkUpper is the rank-k update of the covariance in dot-product form,
// upper triangle only, over contiguous row-major storage:
//
//	cᵢⱼ ← β·cᵢⱼ + α·Σ_{l<k} aᵢₗ·aⱼₗ,   0 ≤ i ≤ j < n
//
// a is n × k (row i at a[i·lda:], channel i's buffered deviations), c is
// n × n (row i at c[i·ldc:]); the strict lower triangle of c is not
// touched. It computes what blas64.Syrk(blas.NoTrans, α, a, β, c) does for
// an upper-triangular c, with the same products summed in the same order
// along l, so results agree with it up to the rounding of the final
// addition.
//
// The kernel works on 4 × 2 blocks of c: per step l it loads four entries
// of rows i…i+3 and two of rows j, j+1 and forms eight products, so every
// loaded value is used two or four times (a dot product uses each once)
// and the eight sums stay in registers. A block of four rows of a (4k
// values, 2 KiB at k = 64) stays in the L1 cache while the sweep over j
// streams the other rows. Slices are re-cut to length k before the loop so
// the compiler drops the bounds checks. Cost: n(n+1)/2·k multiply-adds,
// single-threaded; no allocation.
func syrkUpper(n, k int, a []float64, lda int, alpha, beta float64, c []float64, ldc int) {
	if n == 0 {
		return
	}
	if k == 0 {
		for i := 0; i < n; i++ {
			row := c[i*ldc+i : i*ldc+n]
			for j := range row {
				row[j] *= beta
			}
		}
		return
	}
	i := 0
	for ; i+4 <= n; i += 4 {
		a0 := a[i*lda : i*lda+k]
		a1 := a[(i+1)*lda : (i+1)*lda+k]
		a2 := a[(i+2)*lda : (i+2)*lda+k]
		a3 := a[(i+3)*lda : (i+3)*lda+k]
		c0 := c[i*ldc : i*ldc+n]
		c1 := c[(i+1)*ldc : (i+1)*ldc+n]
		c2 := c[(i+2)*ldc : (i+2)*ldc+n]
		c3 := c[(i+3)*ldc : (i+3)*ldc+n]
		// Diagonal 4 × 4 block: only entries with column ≥ row.
		s00, s01, _, s11, _, _, _, _ := dot4x2(a0, a1, a2, a3, a0, a1)
		c0[i] = beta*c0[i] + alpha*s00
		c0[i+1] = beta*c0[i+1] + alpha*s01
		c1[i+1] = beta*c1[i+1] + alpha*s11
		s02, s03, s12, s13, s22, s23, _, s33 := dot4x2(a0, a1, a2, a3, a2, a3)
		c0[i+2] = beta*c0[i+2] + alpha*s02
		c0[i+3] = beta*c0[i+3] + alpha*s03
		c1[i+2] = beta*c1[i+2] + alpha*s12
		c1[i+3] = beta*c1[i+3] + alpha*s13
		c2[i+2] = beta*c2[i+2] + alpha*s22
		c2[i+3] = beta*c2[i+3] + alpha*s23
		c3[i+3] = beta*c3[i+3] + alpha*s33
		// Off-diagonal run, columns i+4 … n−1: the AVX2/FMA kernel takes
		// the even part when it can.
		j := i + 4
		if ncol := n - j; ncol >= 2 && rowKernel(a[i*lda:], lda, k, a[j*lda:], ncol, c[i*ldc+j:], ldc, alpha, beta) {
			j += ncol &^ 1
		}
		for ; j+2 <= n; j += 2 {
			b0 := a[j*lda : j*lda+k]
			b1 := a[(j+1)*lda : (j+1)*lda+k]
			s00, s01, s10, s11, s20, s21, s30, s31 := dot4x2(a0, a1, a2, a3, b0, b1)
			c0[j] = beta*c0[j] + alpha*s00
			c0[j+1] = beta*c0[j+1] + alpha*s01
			c1[j] = beta*c1[j] + alpha*s10
			c1[j+1] = beta*c1[j+1] + alpha*s11
			c2[j] = beta*c2[j] + alpha*s20
			c2[j+1] = beta*c2[j+1] + alpha*s21
			c3[j] = beta*c3[j] + alpha*s30
			c3[j+1] = beta*c3[j+1] + alpha*s31
		}
		if j < n { // one column left
			b0 := a[j*lda : j*lda+k]
			c0[j] = beta*c0[j] + alpha*dot(a0, b0)
			c1[j] = beta*c1[j] + alpha*dot(a1, b0)
			c2[j] = beta*c2[j] + alpha*dot(a2, b0)
			c3[j] = beta*c3[j] + alpha*dot(a3, b0)
		}
	}
	for ; i < n; i++ { // the last n mod 4 rows
		ai := a[i*lda : i*lda+k]
		ci := c[i*ldc : i*ldc+n]
		for j := i; j < n; j++ {
			ci[j] = beta*ci[j] + alpha*dot(ai, a[j*lda:j*lda+k])
		}
	}
}

// dot4x2 returns the eight dot products of rows a0…a3 with b0, b1 (all of
// the same length).
func dot4x2(a0, a1, a2, a3, b0, b1 []float64) (s00, s01, s10, s11, s20, s21, s30, s31 float64) {
	n := len(a0)
	a1, a2, a3 = a1[:n], a2[:n], a3[:n]
	b0, b1 = b0[:n], b1[:n]
	for l, x0 := range a0 {
		x1, x2, x3 := a1[l], a2[l], a3[l]
		y0, y1 := b0[l], b1[l]
		s00 += x0 * y0
		s01 += x0 * y1
		s10 += x1 * y0
		s11 += x1 * y1
		s20 += x2 * y0
		s21 += x2 * y1
		s30 += x3 * y0
		s31 += x3 * y1
	}
	return
}

// dot returns Σ xₗyₗ (len(y) ≥ len(x)), four-way unrolled.
func dot(x, y []float64) float64 {
	n := len(x)
	y = y[:n]
	var s0, s1, s2, s3 float64
	l := 0
	for ; l+4 <= n; l += 4 {
		s0 += x[l] * y[l]
		s1 += x[l+1] * y[l+1]
		s2 += x[l+2] * y[l+2]
		s3 += x[l+3] * y[l+3]
	}
	for ; l < n; l++ {
		s0 += x[l] * y[l]
	}
	return (s0 + s1) + (s2 + s3)
}

// rankUpdate is syrkUpper where the AVX2/FMA kernel runs (k is padded by
// the caller to a multiple of 4 with zero columns) and gonum's blas64.Syrk
// elsewhere.
func rankUpdate(n, k int, a []float64, lda int, alpha, beta float64, c []float64, ldc int) {
	if n == 0 {
		return
	}
	if hasAVX2FMA || k == 0 {
		syrkUpper(n, k, a, lda, alpha, beta, c, ldc)
		return
	}
	blas64.Syrk(blas.NoTrans, alpha, blas64.General{Rows: n, Cols: k, Stride: lda, Data: a}, beta,
		blas64.Symmetric{N: n, Stride: ldc, Data: c, Uplo: blas.Upper})
}
