package tracker

// syrkRow4AVX2 is the AVX2/FMA micro-kernel of syrkUpper (syrk_amd64.s):
// c[r][j] ← β·c[r][j] + α·Σ_l a[r][l]·b[j][l] for the rows r = 0…3 at a
// (stride lda) and the ncol (even) rows j at b (stride lda), k a positive
// multiple of 4; c rows at stride ldc.
//
//go:noescape
func syrkRow4AVX2(a *float64, lda, k int, b *float64, ncol int, c *float64, ldc int, alpha, beta float64)

func cpuid(eaxArg, ecxArg uint32) (eax, ebx, ecx, edx uint32)

func xgetbv0() (eax uint32)

// hasAVX2FMA reports whether the CPU and the operating system support AVX2
// and FMA3 (CPUID leaf 1 ECX bits 12 FMA, 27 OSXSAVE, 28 AVX; XCR0 bits 1–2
// XMM and YMM state; leaf 7 EBX bit 5 AVX2; Intel SDM vol. 2A, CPUID).
var hasAVX2FMA = func() bool {
	maxLeaf, _, _, _ := cpuid(0, 0)
	if maxLeaf < 7 {
		return false
	}
	_, _, ecx1, _ := cpuid(1, 0)
	const fma, osxsave, avx = 1 << 12, 1 << 27, 1 << 28
	if ecx1&(fma|osxsave|avx) != fma|osxsave|avx {
		return false
	}
	if xgetbv0()&6 != 6 {
		return false
	}
	_, ebx7, _, _ := cpuid(7, 0)
	return ebx7&(1<<5) != 0
}()

// rowKernel updates the off-diagonal run of a 4-row block; ok is false
// when the CPU lacks AVX2/FMA or k is not a positive multiple of 4.
func rowKernel(a []float64, lda, k int, b []float64, ncol int, c []float64, ldc int, alpha, beta float64) (ok bool) {
	if !hasAVX2FMA || k <= 0 || k%4 != 0 || ncol < 2 {
		return false
	}
	// Bounds the assembly relies on.
	_ = a[3*lda+k-1]
	_ = b[(ncol-1)*lda+k-1]
	_ = c[3*ldc+ncol-1]
	n4 := 0
	if hasQuadKernel && ncol >= 4 {
		n4 = ncol &^ 3
		syrkRow4x4AVX512(&a[0], lda, k, &b[0], n4, &c[0], ldc, alpha, beta)
	}
	if n2 := ncol&^1 - n4; n2 > 0 {
		syrkRow4AVX2(&a[0], lda, k, &b[n4*lda], n2, &c[n4], ldc, alpha, beta)
	}
	return true
}

// gerUpdAVX2 is the outer-product micro-kernel of cholUpper's trailing
// update (syrk_amd64.s): c[x][y] ← c[x][y] − Σ_l p[l][x]·q[l][y] for x = 0…3
// and ncol (a multiple of 8) columns y, k ≥ 1 panel rows at stride ldp.
//
//go:noescape
func gerUpdAVX2(p *float64, q *float64, ldp, k int, c *float64, ldc, ncol int)

// trailingUpdate subtracts U₁₂ᵀU₁₂ from the upper triangle of the trailing
// block, where the panel U₁₂ is the k rows at a[k0·lda + k1 :] (rows at
// stride lda) over the columns k1…n−1, and the trailing block is
// a[k1·lda + k1 :]. Entries of the strict lower triangle of the 4 × 4
// diagonal blocks are overwritten with unused values. It reports false
// when the CPU lacks AVX2/FMA (the caller then uses the dot-product form).
func trailingUpdate(a []float64, lda, n, k0, k1 int) bool {
	if !hasAVX2FMA {
		return false
	}
	trailingRows(a, lda, n, k0, k1, k1, n)
	return true
}

// trailingRows is trailingUpdate for the rows i0…i1−1 of the trailing block
// only (i0 ≥ k1, a multiple of 4 unless i1 = n).
func trailingRows(a []float64, lda, n, k0, k1, i0, i1 int) {
	k := k1 - k0
	i := i0
	for ; i+4 <= i1; i += 4 {
		ncol := n - i
		n8 := ncol &^ 7
		if n8 > 0 {
			_ = a[(k1-1)*lda+i+n8-1]
			_ = a[(i+3)*lda+i+n8-1]
			gerUpd(&a[k0*lda+i], a[k0*lda+i:], lda, k, a[i*lda+i:], lda, n8)
		}
		if n8 < ncol {
			tailColumns(a, lda, n, k0, k1, i, i+n8)
		}
	}
	for ; i < i1; i++ { // the last n mod 4 rows
		lastRow(a, lda, n, k0, k1, i)
	}
}

// lastRow subtracts from row i of the trailing block, columns i…n−1, the
// panel's dot products (scalar, one per value).
func lastRow(a []float64, lda, n, k0, k1, i int) {
	for j := i; j < n; j++ {
		s := 0.0
		for l := k0; l < k1; l++ {
			s += a[l*lda+i] * a[l*lda+j]
		}
		a[i*lda+j] -= s
	}
}

// hasMultiPanel reports whether cholUpper defers the trailing updates of
// the panels of a group of panelGroup panels to apply them in one pass
// (gerUpdNAVX512).
var hasMultiPanel = hasPanelKernel && hasAVX512F

// panelGroup is the number of panels whose trailing updates cholUpper
// applies in one pass over the rows past them (hasMultiPanel).
const panelGroup = 4

// trailingRowsN applies, to the rows i0…i1−1 of the trailing block (i0 a
// multiple of 4 unless i1 = n, i0 ≥ k1), the updates of the np panels of
// bs rows each from row k0 on (k1 = k0 + np·bs), in order: every value
// gets the bits of trailingRows for each panel in turn, the columns of 16
// with all the panels in one pass (gerUpdNAVX512), the others panel by
// panel.
func trailingRowsN(a []float64, lda, n, k0, bs, np, i0, i1 int) {
	k1 := k0 + np*bs
	i := i0
	for ; i+4 <= i1; i += 4 {
		ncol := n - i
		n8 := ncol &^ 7
		n16 := n8 &^ 15
		if n16 > 0 {
			_ = a[(k1-1)*lda+i+n16-1]
			_ = a[(i+3)*lda+i+n16-1]
			gerUpdNAVX512(&a[k0*lda+i], &a[k0*lda+i], lda, bs, np, &a[i*lda+i], lda, n16)
		}
		for t := k0; t < k1; t += bs {
			if n8 > n16 {
				_ = a[(t+bs-1)*lda+i+n8-1]
				_ = a[(i+3)*lda+i+n8-1]
				gerUpdAVX2(&a[t*lda+i], &a[t*lda+i+n16], lda, bs, &a[i*lda+i+n16], lda, n8-n16)
			}
			if n8 < ncol {
				tailColumns(a, lda, n, t, t+bs, i, i+n8)
			}
		}
	}
	for ; i < i1; i++ {
		for t := k0; t < k1; t += bs {
			lastRow(a, lda, n, t, t+bs, i)
		}
	}
}

// tailColumns subtracts from the rows i…i+3 of the trailing block, over
// the columns j0…n−1 (fewer than 8, left over by gerUpd), the sums
// Σ_{l=k0}^{k1−1} a[l][i+r]·a[l][j], each formed from zero by adding the
// rounded products in the order of l, then subtracted: the arithmetic of
// one scalar dot product per value, with the panel rows read once each
// (the sums of the 4 × (n − j0) values kept side by side).
func tailColumns(a []float64, lda, n, k0, k1, i, j0 int) {
	m := n - j0
	if hasPanelKernel && m >= 1 && m <= 7 && k1 > k0 {
		var out [28]float64
		_ = a[(k1-1)*lda+i+3]
		_ = a[(k1-1)*lda+n-1]
		tailSumsAVX2(&a[k0*lda+i], &a[k0*lda+j0], lda, k1-k0, m, &out[0])
		for r := 0; r < 4; r++ {
			c := a[(i+r)*lda+j0 : (i+r)*lda+n]
			for y := range c {
				c[y] -= out[4*y+r]
			}
		}
		return
	}
	var s [4][8]float64
	for l := k0; l < k1; l++ {
		row := a[l*lda : l*lda+n]
		p0, p1, p2, p3 := row[i], row[i+1], row[i+2], row[i+3]
		q := row[j0:n]
		for y, v := range q[:m] {
			s[0][y] += float64(p0 * v)
			s[1][y] += float64(p1 * v)
			s[2][y] += float64(p2 * v)
			s[3][y] += float64(p3 * v)
		}
	}
	for r := 0; r < 4; r++ {
		c := a[(i+r)*lda+j0 : (i+r)*lda+n]
		for y := range c {
			c[y] -= s[r][y]
		}
	}
}

// gerKernel subtracts Σ_l p[l][x]·q[l][y] from c[x][y] for the four rows
// x = 0…3 of c (stride ldc) and the first ncol &^ 7 columns y, over k ≥ 1
// rows of p and q (both at stride ldp), with gerUpdAVX2, and returns the
// number of columns done (0 without AVX2/FMA).
func gerKernel(p, q []float64, ldp, k int, c []float64, ldc, ncol int) int {
	n8 := ncol &^ 7
	if !hasAVX2FMA || k < 1 || n8 == 0 {
		return 0
	}
	// Bounds the assembly relies on.
	_ = p[(k-1)*ldp+3]
	_ = q[(k-1)*ldp+n8-1]
	_ = c[3*ldc+n8-1]
	gerUpd(&p[0], q, ldp, k, c, ldc, n8)
	return n8
}
