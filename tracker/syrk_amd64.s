#include "textflag.h"
#include "kernels_amd64.h"

// func syrkRow4AVX2(a *float64, lda, k int, b *float64, ncol int, c *float64, ldc int, alpha, beta float64)
//
// For the four rows a, a+lda, a+2·lda, a+3·lda (k values each, k a positive
// multiple of 4) and the ncol rows b, b+lda, … (ncol even), updates the
// 4 × ncol block of c at c, c+ldc, c+2·ldc, c+3·ldc:
//	c[r][j] ← β·c[r][j] + α·Σ_l a[r][l]·b[j][l]
// Eight 4-wide accumulators (4 rows × 2 columns) per column pair, fused
// multiply-adds, horizontal sums at the end. Strides are in elements.
// Uses Y15 (X15 is undefined in ABI0 code; the ABI wrapper restores it).
TEXT ·syrkRow4AVX2(SB), NOSPLIT, $0-72
	MOVQ a+0(FP), SI
	MOVQ lda+8(FP), R8
	SHLQ $3, R8
	MOVQ k+16(FP), BX
	SHLQ $3, BX
	MOVQ b+24(FP), DI
	MOVQ c+40(FP), DX
	MOVQ ldc+48(FP), R10
	SHLQ $3, R10
	VBROADCASTSD alpha+56(FP), Y15
	VBROADCASTSD beta+64(FP), Y14
	LEAQ (SI)(R8*1), R11
	LEAQ (R11)(R8*1), R12
	LEAQ (R12)(R8*1), R13

pair:
	CMPQ ncol+32(FP), $2
	JLT  done
	LEAQ (DI)(R8*1), R9
	ZERO8(VXORPD, Y0, Y1, Y2, Y3, Y4, Y5, Y6, Y7)
	XORQ AX, AX

loop:
	VMOVUPD     (SI)(AX*1), Y8
	VMOVUPD     (R11)(AX*1), Y9
	VMOVUPD     (R12)(AX*1), Y10
	VMOVUPD     (R13)(AX*1), Y11
	VMOVUPD     (DI)(AX*1), Y12
	VMOVUPD     (R9)(AX*1), Y13
	ROWFMA2(Y8, Y0, Y1)
	ROWFMA2(Y9, Y2, Y3)
	ROWFMA2(Y10, Y4, Y5)
	ROWFMA2(Y11, Y6, Y7)
	ADDQ        $32, AX
	CMPQ        AX, BX
	JLT         loop

	// Row r: the lane sums of its two columns, X = (s_r0, s_r1); c ← β·c + α·s.
	VHADDPD Y1, Y0, Y0
	PAIRSUM(Y0, X0, X1, (DX))
	VHADDPD Y3, Y2, Y2
	PAIRSUM(Y2, X2, X3, (DX)(R10*1))
	VHADDPD Y5, Y4, Y4
	PAIRSUM(Y4, X4, X5, (DX)(R10*2))
	LEAQ    (DX)(R10*2), CX
	VHADDPD Y7, Y6, Y6
	PAIRSUM(Y6, X6, X7, (CX)(R10*1))

	ADDQ $16, DX
	LEAQ (DI)(R8*2), DI
	SUBQ $2, ncol+32(FP)
	JMP  pair

done:
	VZEROUPPER
	RET

// func cpuid(eaxArg, ecxArg uint32) (eax, ebx, ecx, edx uint32)
TEXT ·cpuid(SB), NOSPLIT, $0-24
	MOVL eaxArg+0(FP), AX
	MOVL ecxArg+4(FP), CX
	CPUID
	MOVL AX, eax+8(FP)
	MOVL BX, ebx+12(FP)
	MOVL CX, ecx+16(FP)
	MOVL DX, edx+20(FP)
	RET

// func xgetbv0() (eax uint32)
TEXT ·xgetbv0(SB), NOSPLIT, $0-4
	MOVL $0, CX
	XGETBV
	MOVL AX, eax+0(FP)
	RET

// func gerUpdAVX2(p *float64, q *float64, ldp, k int, c *float64, ldc, ncol int)
//
// Outer-product form of the trailing update of the blocked Cholesky, for
// the four rows x = 0…3 at p and the ncol (a multiple of 8) columns y at q
// of a k-row panel (rows at stride ldp):
//	c[x][y] ← c[x][y] − Σ_l p[l][x]·q[l][y]
// Per panel row: four broadcasts, two 4-wide loads, eight fused
// multiply-adds into eight accumulators (4 rows × 8 columns); no horizontal
// sums. k ≥ 1. Strides are in elements.
TEXT ·gerUpdAVX2(SB), NOSPLIT, $0-56
	MOVQ p+0(FP), SI
	MOVQ q+8(FP), DI
	MOVQ ldp+16(FP), R8
	SHLQ $3, R8
	MOVQ k+24(FP), CX
	MOVQ c+32(FP), DX
	MOVQ ldc+40(FP), R10
	SHLQ $3, R10
	MOVQ ncol+48(FP), R9

gblock:
	CMPQ R9, $8
	JLT  gdone
	ZERO8(VXORPD, Y0, Y1, Y2, Y3, Y4, Y5, Y6, Y7)
	MOVQ SI, R11
	MOVQ DI, R12
	MOVQ CX, BX

gloop:
	GERSTEP(32, Y8, Y9, Y10, Y11, Y12, Y13, Y0, Y1, Y2, Y3, Y4, Y5, Y6, Y7)
	DECQ BX
	JNZ  gloop

	SUBC2((DX), Y0, Y1)
	SUBC2((DX)(R10*1), Y2, Y3)
	SUBC2((DX)(R10*2), Y4, Y5)
	LEAQ (DX)(R10*2), R13
	SUBC2((R13)(R10*1), Y6, Y7)

	ADDQ $64, DI
	ADDQ $64, DX
	SUBQ $8, R9
	JMP  gblock

gdone:
	VZEROUPPER
	RET
