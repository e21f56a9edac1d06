package tracker

// panelRowAVX2 is the row kernel of cholUpper's panel (panel_amd64.s):
// n (a multiple of 4) values at y get cnt ≥ 0 updates y ← y − coef[c]·x_c,
// x_c = y + offs[c] (elements), in order, each product rounded before its
// subtraction, and are then multiplied by scale.
//
//go:noescape
func panelRowAVX2(y *float64, n int, offs *int, coef *float64, cnt int, scale float64)

// hasPanelKernel reports whether cholUpper factors its panels with
// panelRowAVX2 (a variable, so that tests can compare both paths).
var hasPanelKernel = hasAVX2FMA

// panelRow finishes the panel row y = a[i0 : i0+n] (the part right of the
// diagonal) of cholUpper: the updates y ← y − coef[c]·a[i0+offs[c] : …]
// for c = 0…len(coef)−1 in order, each product rounded before its
// subtraction, then y ← y·scale: the bits of len(coef) calls of gonum's
// Axpy(−coef[c], x_c, y) and one of Scal(scale, y). The first n &^ 7
// values by panelRowAVX512 where the CPU has AVX-512F, up to n &^ 3 by
// panelRowAVX2, the rest here.
func panelRow(a []float64, i0, n int, offs []int, coef []float64, scale float64) {
	cnt := len(coef)
	if n <= 0 {
		return
	}
	n4 := n &^ 3
	if n4 > 0 {
		// Bounds the assembly relies on.
		_ = a[i0+n4-1]
		for _, o := range offs[:cnt] {
			_ = a[i0+o]
			_ = a[i0+o+n4-1]
		}
		var o0 *int
		var c0 *float64
		if cnt > 0 {
			o0, c0 = &offs[0], &coef[0]
		}
		n8 := 0
		if hasAVX512F {
			n8 = n4 &^ 7
			if n8 > 0 {
				panelRowAVX512(&a[i0], n8, o0, c0, cnt, scale)
			}
		}
		if n4 > n8 {
			panelRowAVX2(&a[i0+n8], n4-n8, o0, c0, cnt, scale)
		}
	}
	for j := i0 + n4; j < i0+n; j++ {
		y := a[j]
		for c, o := range offs[:cnt] {
			y -= float64(coef[c] * a[j+o]) // the conversion keeps the product rounded (no fused multiply-add)
		}
		a[j] = y * scale
	}
}

// tailSumsAVX2 forms the sums of tailColumns (panel_amd64.s): out[4y + r] =
// Σ_l p[l][r]·q[l][y] for r < 4, y < m (1 ≤ m ≤ 7), k ≥ 1 rows at stride
// ldp, each product rounded before it is added; out holds 28 values.
//
//go:noescape
func tailSumsAVX2(p *float64, q *float64, ldp, k, m int, out *float64)

// hasLaneKernel reports whether resStat.forward takes eight rows of L per
// pass with dotLanes8PackedAVX2 (a variable, so that tests can compare
// both paths).
var hasLaneKernel = hasAVX2FMA

// dotLanes8PackedAVX2 writes the unreduced lane sums of eight rows' dot
// products with y (panel_amd64.s), the rows in forward's packed layout
// (packedLen: values l…l+3 of row r at a[8l + 4r : 8l + 4r + 4]):
// out[4r + j] = Σ_{l ≡ j (mod 4)} a_r[l]·y[l], fused multiply-adds in the
// order of l, k a positive multiple of 4.
//
//go:noescape
func dotLanes8PackedAVX2(a *float64, k int, y *float64, out *float64)

// dotLanes8Packed is dotLanes8PackedAVX2 on a block of eight rows in the
// packed layout (8k values over the first k columns, k a positive
// multiple of 4), into out (32 values).
func dotLanes8Packed(a []float64, k int, y, out []float64) {
	// Bounds the assembly relies on.
	_ = a[8*k-1]
	_ = y[k-1]
	_ = out[31]
	dotLanes8PackedAVX2(&a[0], k, &y[0], &out[0])
}
