//go:build !amd64

package tracker

const hasAVX2FMA = false

func rowKernel(a []float64, lda, k int, b []float64, ncol int, c []float64, ldc int, alpha, beta float64) bool {
	return false
}

func trailingUpdate(a []float64, lda, n, k0, k1 int) bool { return false }

const hasMultiPanel = false

const panelGroup = 4

func trailingRowsN(a []float64, lda, n, k0, bs, np, i0, i1 int) {}

func gerKernel(p, q []float64, ldp, k int, c []float64, ldc, ncol int) int { return 0 }
