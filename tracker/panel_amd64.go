package tracker

// panelSubAVX2 is the row kernel of cholUpper's panel (panel_amd64.s):
// n (a multiple of 4) values at y get cnt ≥ 1 updates y ← y − coef[c]·x_c,
// x_c = y + offs[c] (elements), in order, each product rounded before its
// subtraction.
//
//go:noescape
func panelSubAVX2(y *float64, n int, offs *int, coef *float64, cnt int)

// hasPanelKernel reports whether cholUpper factors its panels with
// panelSubAVX2 (a variable, so that tests can compare both paths).
var hasPanelKernel = hasAVX2FMA

// panelSub applies to y = a[i0 : i0+n] the updates
// y ← y − coef[c]·a[i0+offs[c] : …] for c = 0…len(coef)−1 in order, each
// product rounded before its subtraction: the bits of len(coef) calls of
// gonum's Axpy(−coef[c], x_c, y). The first n &^ 3 values by panelSubAVX2,
// the rest here.
func panelSub(a []float64, i0, n int, offs []int, coef []float64) {
	cnt := len(coef)
	if cnt == 0 || n <= 0 {
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
		panelSubAVX2(&a[i0], n4, &offs[0], &coef[0], cnt)
	}
	for j := i0 + n4; j < i0+n; j++ {
		y := a[j]
		for c, o := range offs[:cnt] {
			y -= float64(coef[c] * a[j+o]) // the conversion keeps the product rounded (no fused multiply-add)
		}
		a[j] = y
	}
}
