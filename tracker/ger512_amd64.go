package tracker

// hasAVX512F reports whether the CPU and the operating system support
// AVX-512F (CPUID leaf 7 EBX bit 16; XCR0 bits 5–7 opmask and ZMM state
// besides bits 1–2; Intel SDM vol. 2A, CPUID and XGETBV), with AVX2/FMA.
var hasAVX512F = func() bool {
	if !hasAVX2FMA || xgetbv0()&0xe6 != 0xe6 {
		return false
	}
	_, ebx7, _, _ := cpuid(7, 0)
	return ebx7&(1<<16) != 0
}()

// gerUpd is gerUpdAVX2 over ncol (a multiple of 8) columns, the first
// ncol &^ 15 by gerUpdNAVX512 (one panel) where the CPU has AVX-512F (same
// results: each value is summed in the same order; the wider vectors halve
// the instructions of the trailing update of the factorization).
func gerUpd(p *float64, q []float64, ldp, k int, c []float64, ldc, ncol int) {
	n16 := 0
	if hasAVX512F {
		n16 = ncol &^ 15
		if n16 > 0 {
			gerUpdNAVX512(p, &q[0], ldp, k, 1, &c[0], ldc, n16)
		}
	}
	if ncol > n16 {
		gerUpdAVX2(p, &q[n16], ldp, k, &c[n16], ldc, ncol-n16)
	}
}

// gerUpdNAVX512 is gerUpdAVX2 with 8-wide vectors for np consecutive
// panels of kp rows each in one pass over c (ger512_amd64.s), ncol a
// multiple of 16: the bits of one gerUpdAVX2 call per panel, in order.
//
//go:noescape
func gerUpdNAVX512(p *float64, q *float64, ldp, kp, np int, c *float64, ldc, ncol int)

// panelRowAVX512 is panelRowAVX2 with 8-wide vectors (ger512_amd64.s), n a
// multiple of 8: the same operations on each value, the same bits.
//
//go:noescape
func panelRowAVX512(y *float64, n int, offs *int, coef *float64, cnt int, scale float64)

// syrkRow4x4AVX512 is syrkRow4AVX2 four columns at a time (ger512_amd64.s),
// ncol a multiple of 4: each lane sums the same products in the same
// order and is reduced the same way, so it gives the same bits.
//
//go:noescape
func syrkRow4x4AVX512(a *float64, lda, k int, b *float64, ncol int, c *float64, ldc int, alpha, beta float64)

// hasQuadKernel reports whether rowKernel takes four columns at a time
// with syrkRow4x4AVX512 (a variable, so that tests can compare both).
var hasQuadKernel = hasAVX512F
