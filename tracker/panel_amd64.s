#include "textflag.h"
#include "kernels_amd64.h"

// func panelRowAVX2(y *float64, n int, offs *int, coef *float64, cnt int, scale float64)
//
// For the cnt ≥ 0 source rows x_c = y + offs[c] (offsets in elements, any
// sign) and the n (a multiple of 4) values at y:
//	y[j] ← ((…((y[j] − coef[0]·x_0[j]) − coef[1]·x_1[j]) …) − coef[cnt−1]·x_{cnt−1}[j])·scale
// each product rounded before its subtraction (VMULPD, then VSUBPD; no
// fused multiply-add), so every value gets the bits of cnt successive
// y ← y + (−coef)·x updates (gonum's Axpy) and then y ← y·scale (gonum's
// Scal). 16 values per block in four independent registers, then 4 at a
// time.
TEXT ·panelRowAVX2(SB), NOSPLIT, $0-48
	MOVQ         y+0(FP), DI
	MOVQ         n+8(FP), CX
	MOVQ         offs+16(FP), R8
	MOVQ         coef+24(FP), R9
	MOVQ         cnt+32(FP), R10
	VBROADCASTSD scale+40(FP), Y9
	PANELROW(32, Y0, Y1, Y2, Y3, Y4, Y5, Y6, Y7, Y8, Y9)

// func tailSumsAVX2(p *float64, q *float64, ldp, k, m int, out *float64)
//
// For the four values p[l][0…3] and the m (1 ≤ m ≤ 7) values q[l][0…m−1]
// of k ≥ 1 panel rows (both at stride ldp):
//	out[4y + r] = Σ_l p[l][r]·q[l][y]
// summed from zero in the order of l, each product rounded before it is
// added (VMULPD, then VADDPD; no fused multiply-add): the arithmetic of
// one scalar dot product per value. out holds 28 values (all written).
TEXT ·tailSumsAVX2(SB), NOSPLIT, $0-48
	MOVQ   p+0(FP), SI
	MOVQ   q+8(FP), DI
	MOVQ   ldp+16(FP), R8
	SHLQ   $3, R8
	MOVQ   k+24(FP), CX
	MOVQ   m+32(FP), R9
	MOVQ   out+40(FP), DX
	ZERO4(VXORPD, Y0, Y1, Y2, Y3)
	VXORPD Y4, Y4, Y4
	VXORPD Y5, Y5, Y5
	VXORPD Y6, Y6, Y6

tloop:
	VMOVUPD (SI), Y7
	TAILCOL(0, Y0)
	TAILMORE(2)
	TAILCOL(8, Y1)
	TAILMORE(3)
	TAILCOL(16, Y2)
	TAILMORE(4)
	TAILCOL(24, Y3)
	TAILMORE(5)
	TAILCOL(32, Y4)
	TAILMORE(6)
	TAILCOL(40, Y5)
	TAILMORE(7)
	TAILCOL(48, Y6)

tnext:
	ADDQ R8, SI
	ADDQ R8, DI
	DECQ CX
	JNZ  tloop

	STORE4(32, 0, DX, Y0, Y1, Y2, Y3)
	VMOVUPD Y4, 128(DX)
	VMOVUPD Y5, 160(DX)
	VMOVUPD Y6, 192(DX)
	VZEROUPPER
	RET

// func dotLanes8PackedAVX2(a *float64, k int, y *float64, out *float64)
//
// For eight rows stored interleaved by four values (the values l…l+3 of
// row r at a[8l + 4r : 8l + 4r + 4], l = 0, 4, 8, …: one sequential stream
// of 8k values, k a positive multiple of 4) and the k values at y, writes
// the four lane sums of each row's dot product with y, unreduced:
//	out[4r + j] = Σ_{l ≡ j (mod 4)} a_r[l]·y[l]
// each lane a chain of fused multiply-adds from zero in the order of l:
// the accumulators of syrkRow4AVX2 before its horizontal sum, for twice
// the rows per pass over y (one column, no second one). out holds 32
// values.
TEXT ·dotLanes8PackedAVX2(SB), NOSPLIT, $0-32
	MOVQ   a+0(FP), SI
	MOVQ   k+8(FP), CX
	MOVQ   y+16(FP), DI
	MOVQ   out+24(FP), DX
	ZERO8(VXORPD, Y0, Y1, Y2, Y3, Y4, Y5, Y6, Y7)

ploop:
	VMOVUPD (DI), Y8
	LANEFMA4(0, Y0, Y1, Y2, Y3)
	LANEFMA4(128, Y4, Y5, Y6, Y7)
	ADDQ    $256, SI
	ADDQ    $32, DI
	SUBQ    $4, CX
	JNZ     ploop

	STORE4(32, 0, DX, Y0, Y1, Y2, Y3)
	STORE4(32, 128, DX, Y4, Y5, Y6, Y7)
	VZEROUPPER
	RET
