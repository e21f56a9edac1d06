//go:build !amd64

package tracker

var hasPanelKernel = false

func panelRow(a []float64, i0, n int, offs []int, coef []float64, scale float64) {
	panic("tracker: panelRow without the amd64 kernel")
}

var hasLaneKernel = false

func dotLanes8(a []float64, lda, k int, y, out []float64) {
	panic("tracker: dotLanes8 without the amd64 kernel")
}
