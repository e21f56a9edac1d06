#include "textflag.h"
#include "kernels_amd64.h"

// func gerUpdNAVX512(p *float64, q *float64, ldp, kp, np int, c *float64, ldc, ncol int)
//
// The outer-product update of gerUpdAVX2 with 8-wide vectors, for the four
// rows x = 0…3 at p and the ncol (a multiple of 16) columns y at q, over
// np ≥ 1 consecutive panels of kp ≥ 1 rows each (rows at stride ldp), in
// one pass over c:
//	c[x][y] ← (…(c[x][y] − S₀[x][y]) − S₁[x][y] …) − S_{np−1}[x][y],
//	S_t[x][y] = Σ_{t·kp ≤ l < (t+1)·kp} p[l][x]·q[l][y]
// Per panel row: four broadcasts, two 8-wide loads, eight fused
// multiply-adds into eight accumulators (4 rows × 16 columns). Each sum is
// formed from zero over its panel's rows in the same order as by
// gerUpdAVX2 and subtracted in turn, so every value gets the bits of one
// gerUpdAVX2 call per panel, in order; c is read and written once instead
// of np times. Strides are in elements.
TEXT ·gerUpdNAVX512(SB), NOSPLIT, $0-64
	MOVQ p+0(FP), SI
	MOVQ q+8(FP), DI
	MOVQ ldp+16(FP), R8
	SHLQ $3, R8
	MOVQ c+40(FP), DX
	MOVQ ldc+48(FP), R10
	SHLQ $3, R10
	MOVQ ncol+56(FP), R9

nblock:
	CMPQ    R9, $16
	JLT     ndone
	LEAQ    (DX)(R10*2), R13
	VMOVUPD (DX), Z16
	VMOVUPD 64(DX), Z17
	VMOVUPD (DX)(R10*1), Z18
	VMOVUPD 64(DX)(R10*1), Z19
	VMOVUPD (R13), Z20
	VMOVUPD 64(R13), Z21
	VMOVUPD (R13)(R10*1), Z22
	VMOVUPD 64(R13)(R10*1), Z23
	MOVQ    SI, R11
	MOVQ    DI, R12
	MOVQ    np+32(FP), CX

npanel:
	ZERO8(VPXORQ, Z0, Z1, Z2, Z3, Z4, Z5, Z6, Z7)
	MOVQ kp+24(FP), BX

nloop:
	GERSTEP(64, Z8, Z9, Z10, Z11, Z12, Z13, Z0, Z1, Z2, Z3, Z4, Z5, Z6, Z7)
	DECQ BX
	JNZ  nloop

	VOP4(VSUBPD, Z0, Z1, Z2, Z3, Z16, Z17, Z18, Z19)
	VOP4(VSUBPD, Z4, Z5, Z6, Z7, Z20, Z21, Z22, Z23)
	DECQ CX
	JNZ  npanel

	VMOVUPD Z16, (DX)
	VMOVUPD Z17, 64(DX)
	VMOVUPD Z18, (DX)(R10*1)
	VMOVUPD Z19, 64(DX)(R10*1)
	VMOVUPD Z20, (R13)
	VMOVUPD Z21, 64(R13)
	VMOVUPD Z22, (R13)(R10*1)
	VMOVUPD Z23, 64(R13)(R10*1)

	ADDQ $128, DI
	ADDQ $128, DX
	SUBQ $16, R9
	JMP  nblock

ndone:
	VZEROUPPER
	RET

// func panelRowAVX512(y *float64, n int, offs *int, coef *float64, cnt int, scale float64)
//
// panelRowAVX2 with 8-wide vectors, n a multiple of 8: 32 values per block
// in four registers, then 8 at a time. The same operations on each value
// (VMULPD, then VSUBPD, then the scaling), so the same bits.
TEXT ·panelRowAVX512(SB), NOSPLIT, $0-48
	MOVQ         y+0(FP), DI
	MOVQ         n+8(FP), CX
	MOVQ         offs+16(FP), R8
	MOVQ         coef+24(FP), R9
	MOVQ         cnt+32(FP), R10
	VBROADCASTSD scale+40(FP), Z9
	PANELROW(64, Z0, Z1, Z2, Z3, Z4, Z5, Z6, Z7, Z8, Z9)

// REDUCEPAIR reduces the accumulator z (two columns' 4-wide lane sums
// side by side, its low half y) as syrkRow4AVX2 reduces a pair of its
// accumulators, and updates the two values at addr: c ← β·c + α·s.
#define REDUCEPAIR(z, y, addr) \
	VEXTRACTF64X4 $1, z, Y9 \
	VHADDPD       Y9, y, Y8 \
	PAIRSUM(Y8, X8, X9, addr)

// func syrkRow4x4AVX512(a *float64, lda, k int, b *float64, ncol int, c *float64, ldc int, alpha, beta float64)
//
// syrkRow4AVX2 four columns at a time (ncol a multiple of 4): each 8-wide
// accumulator holds the 4-wide accumulators of two columns side by side
// (the row's four values broadcast to both halves), so every lane sums the
// same products in the same order with the same fused multiply-adds, and
// the halves are then reduced exactly as syrkRow4AVX2 reduces them: the
// same bits, with half the multiply-add instructions and eight
// accumulators per pass.
TEXT ·syrkRow4x4AVX512(SB), NOSPLIT, $0-72
	MOVQ         a+0(FP), SI
	MOVQ         lda+8(FP), R8
	SHLQ         $3, R8
	MOVQ         k+16(FP), BX
	SHLQ         $3, BX
	MOVQ         b+24(FP), DI
	MOVQ         ncol+32(FP), CX
	MOVQ         c+40(FP), DX
	MOVQ         ldc+48(FP), R10
	SHLQ         $3, R10
	VBROADCASTSD alpha+56(FP), Y15
	VBROADCASTSD beta+64(FP), Y14
	LEAQ         (R8)(R8*2), R9

quad:
	CMPQ CX, $4
	JLT  quaddone
	ZERO8(VPXORQ, Z0, Z1, Z2, Z3, Z4, Z5, Z6, Z7)
	MOVQ SI, R11
	MOVQ DI, R12
	XORQ AX, AX

quadloop:
	VMOVUPD         (R12), Y10
	VINSERTF64X4    $1, (R12)(R8*1), Z10, Z10
	VMOVUPD         (R12)(R8*2), Y11
	VINSERTF64X4    $1, (R12)(R9*1), Z11, Z11
	QUADFMA2((R11), Z12, Z0, Z1)
	QUADFMA2((R11)(R8*1), Z13, Z2, Z3)
	QUADFMA2((R11)(R8*2), Z12, Z4, Z5)
	QUADFMA2((R11)(R9*1), Z13, Z6, Z7)
	ADDQ            $32, R11
	ADDQ            $32, R12
	ADDQ            $32, AX
	CMPQ            AX, BX
	JLT             quadloop

	LEAQ (DX)(R10*2), AX
	REDUCEPAIR(Z0, Y0, (DX))
	REDUCEPAIR(Z1, Y1, 16(DX))
	REDUCEPAIR(Z2, Y2, (DX)(R10*1))
	REDUCEPAIR(Z3, Y3, 16(DX)(R10*1))
	REDUCEPAIR(Z4, Y4, (AX))
	REDUCEPAIR(Z5, Y5, 16(AX))
	REDUCEPAIR(Z6, Y6, (AX)(R10*1))
	REDUCEPAIR(Z7, Y7, 16(AX)(R10*1))

	ADDQ $32, DX
	LEAQ (DI)(R8*4), DI
	SUBQ $4, CX
	JMP  quad

quaddone:
	VZEROUPPER
	RET
