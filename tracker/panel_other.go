//go:build !amd64

package tracker

var hasPanelKernel = false

func panelRow(a []float64, i0, n int, offs []int, coef []float64, scale float64) {
	panic("tracker: panelRow without the amd64 kernel")
}

var hasLaneKernel = false

func dotLanes8Packed(a []float64, k int, y, out []float64) {
	panic("tracker: dotLanes8Packed without the amd64 kernel")
}
