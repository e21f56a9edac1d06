#include "textflag.h"

// func panelSubAVX2(y *float64, n int, offs *int, coef *float64, cnt int)
//
// For the cnt source rows x_c = y + offs[c] (offsets in elements, any
// sign) and the n (a multiple of 4) values at y:
//	y[j] ← (…((y[j] − coef[0]·x_0[j]) − coef[1]·x_1[j]) …) − coef[cnt−1]·x_{cnt−1}[j]
// each product rounded before its subtraction (VMULPD, then VSUBPD; no
// fused multiply-add), so every value gets the bits of cnt successive
// y ← y + (−coef)·x updates (gonum's Axpy). 16 values per block in four
// independent registers, then 4 at a time. cnt ≥ 1.
TEXT ·panelSubAVX2(SB), NOSPLIT, $0-40
	MOVQ y+0(FP), DI
	MOVQ n+8(FP), CX
	MOVQ offs+16(FP), R8
	MOVQ coef+24(FP), R9
	MOVQ cnt+32(FP), R10

blk16:
	CMPQ    CX, $16
	JLT     blk4
	VMOVUPD (DI), Y0
	VMOVUPD 32(DI), Y1
	VMOVUPD 64(DI), Y2
	VMOVUPD 96(DI), Y3
	XORQ    BX, BX

src16:
	MOVQ         (R8)(BX*8), R11
	LEAQ         (DI)(R11*8), R12
	VBROADCASTSD (R9)(BX*8), Y4
	VMULPD       (R12), Y4, Y5
	VMULPD       32(R12), Y4, Y6
	VMULPD       64(R12), Y4, Y7
	VMULPD       96(R12), Y4, Y8
	VSUBPD       Y5, Y0, Y0
	VSUBPD       Y6, Y1, Y1
	VSUBPD       Y7, Y2, Y2
	VSUBPD       Y8, Y3, Y3
	INCQ         BX
	CMPQ         BX, R10
	JLT          src16

	VMOVUPD Y0, (DI)
	VMOVUPD Y1, 32(DI)
	VMOVUPD Y2, 64(DI)
	VMOVUPD Y3, 96(DI)
	ADDQ    $128, DI
	SUBQ    $16, CX
	JMP     blk16

blk4:
	CMPQ    CX, $4
	JLT     done
	VMOVUPD (DI), Y0
	XORQ    BX, BX

src4:
	MOVQ         (R8)(BX*8), R11
	LEAQ         (DI)(R11*8), R12
	VBROADCASTSD (R9)(BX*8), Y4
	VMULPD       (R12), Y4, Y5
	VSUBPD       Y5, Y0, Y0
	INCQ         BX
	CMPQ         BX, R10
	JLT          src4

	VMOVUPD Y0, (DI)
	ADDQ    $32, DI
	SUBQ    $4, CX
	JMP     blk4

done:
	VZEROUPPER
	RET
