//go:build !amd64

package tracker

var hasPanelKernel = false

func panelSub(a []float64, i0, n int, offs []int, coef []float64) {
	panic("tracker: panelSub without the amd64 kernel")
}
