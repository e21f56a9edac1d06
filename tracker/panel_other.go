//go:build !amd64

package tracker

var hasPanelKernel = false

func panelRow(a []float64, i0, n int, offs []int, coef []float64, scale float64) {
	panic("tracker: panelRow without the amd64 kernel")
}
