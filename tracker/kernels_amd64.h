// Macros shared by the amd64 kernels (ger512_amd64.s, panel_amd64.s,
// syrk_amd64.s). Each one expands to exactly the instructions it replaces,
// in the same order, so a kernel written with them assembles to the same
// instruction stream (and gives the same bits) as written out by hand.
// Register and memory operands are passed in; W is a vector's width in
// bytes (32 for 4-wide Y registers, 64 for 8-wide Z registers). An offset
// of 0 assembles as no offset.

// VOP4(OP, S0, S1, S2, S3, D0, D1, D2, D3): Dᵢ ← Dᵢ OP Sᵢ for i = 0…3
// (OP Sᵢ, Dᵢ, Dᵢ; for VSUBPD, Dᵢ − Sᵢ).
#define VOP4(OP, S0, S1, S2, S3, D0, D1, D2, D3) \
	OP S0, D0, D0 \
	OP S1, D1, D1 \
	OP S2, D2, D2 \
	OP S3, D3, D3

// ZERO4(OP, A, B, C, D) clears four registers: OP (VXORPD or VPXORQ) of
// each with itself.
#define ZERO4(OP, A, B, C, D) VOP4(OP, A, B, C, D, A, B, C, D)

// ZERO8(OP, A, B, C, D, E, F, G, H) clears eight registers: ZERO4 twice.
#define ZERO8(OP, A, B, C, D, E, F, G, H) \
	ZERO4(OP, A, B, C, D) \
	ZERO4(OP, E, F, G, H)

// LOAD4(W, OFF, BASE, A, B, C, D) loads the four consecutive vectors at
// OFF(BASE), (OFF+W)(BASE), … into A, B, C, D.
#define LOAD4(W, OFF, BASE, A, B, C, D) \
	VMOVUPD OFF(BASE), A \
	VMOVUPD (OFF+W)(BASE), B \
	VMOVUPD (OFF+2*W)(BASE), C \
	VMOVUPD (OFF+3*W)(BASE), D

// STORE4(W, OFF, BASE, A, B, C, D) stores A, B, C, D to the four
// consecutive vectors at OFF(BASE), (OFF+W)(BASE), ….
#define STORE4(W, OFF, BASE, A, B, C, D) \
	VMOVUPD A, OFF(BASE) \
	VMOVUPD B, (OFF+W)(BASE) \
	VMOVUPD C, (OFF+2*W)(BASE) \
	VMOVUPD D, (OFF+3*W)(BASE)

// GERSTEP(W, X0, X1, B0, B1, B2, B3, A0, A1, A2, A3, A4, A5, A6, A7) is one
// panel row of the 4 × 2-vector outer product of gerUpdAVX2 and
// gerUpdNAVX512: X0, X1 ← the two vectors of q's row at R12; for x = 0…3,
// Bₓ ← p's value x at R11 broadcast, A₂ₓ += X0·Bₓ and A₂ₓ₊₁ += X1·Bₓ
// (fused multiply-adds); then both rows advance by the stride R8.
#define GERSTEP(W, X0, X1, B0, B1, B2, B3, A0, A1, A2, A3, A4, A5, A6, A7) \
	VMOVUPD (R12), X0 \
	VMOVUPD W(R12), X1 \
	GERFMA2(0, B0, X0, X1, A0, A1) \
	GERFMA2(8, B1, X0, X1, A2, A3) \
	GERFMA2(16, B2, X0, X1, A4, A5) \
	GERFMA2(24, B3, X0, X1, A6, A7) \
	ADDQ R8, R11 \
	ADDQ R8, R12

// GERFMA2(OFF, B, X0, X1, A0, A1): B ← the value at OFF(R11) broadcast,
// A0 += X0·B, A1 += X1·B (fused multiply-adds).
#define GERFMA2(OFF, B, X0, X1, A0, A1) \
	VBROADCASTSD OFF(R11), B \
	VFMADD231PD  X0, B, A0 \
	VFMADD231PD  X1, B, A1

// PAIRSUM(YS, XS, XT, ADDR) finishes a pair of dot products whose two sums
// lie in the halves of YS (XS its low half): XS ← low + high half, then the
// two values at ADDR: c ← β·c + α·s (α broadcast in X15, β in X14; XT is
// scratch). The last steps of syrkRow4AVX2 and syrkRow4x4AVX512.
#define PAIRSUM(YS, XS, XT, ADDR) \
	VEXTRACTF128 $1, YS, XT \
	VADDPD       XT, XS, XS \
	VMULPD       X15, XS, XS \
	VMOVUPD      ADDR, XT \
	VFMADD231PD  X14, XT, XS \
	VMOVUPD      XS, ADDR

// PANELSRC(C, END) starts source row BX of panelRowAVX2/panelRowAVX512:
// to END once BX reaches cnt (R10); else R12 ← y + offs[BX] (the source
// row) and C ← coef[BX] broadcast.
#define PANELSRC(C, END) \
	CMPQ         BX, R10 \
	JGE          END \
	MOVQ         (R8)(BX*8), R11 \
	LEAQ         (DI)(R11*8), R12 \
	VBROADCASTSD (R9)(BX*8), C

// PANELROW(W, A0, A1, A2, A3, C, P0, P1, P2, P3, S) is the body of
// panelRowAVX2 (W = 32, Y registers) and panelRowAVX512 (W = 64, Z
// registers) after the argument loads (y in DI, n in CX, offs in R8, coef
// in R9, cnt in R10, scale broadcast in S): blocks of four vectors (W/2
// values) in A0…A3, then one vector (W/8 values) at a time in A0. For each
// source row: Pᵢ ← coef·x (rounded), Aᵢ ← Aᵢ − Pᵢ; then Aᵢ ← Aᵢ·S, stored.
#define PANELROW(W, A0, A1, A2, A3, C, P0, P1, P2, P3, S) \
blk4: \
	CMPQ   CX, $(W/2) \
	JLT    blk1 \
	LOAD4(W, 0, DI, A0, A1, A2, A3) \
	XORQ   BX, BX \
src4: \
	PANELSRC(C, end4) \
	VMULPD (R12), C, P0 \
	VMULPD W(R12), C, P1 \
	VMULPD (2*W)(R12), C, P2 \
	VMULPD (3*W)(R12), C, P3 \
	VOP4(VSUBPD, P0, P1, P2, P3, A0, A1, A2, A3) \
	INCQ   BX \
	JMP    src4 \
end4: \
	VOP4(VMULPD, S, S, S, S, A0, A1, A2, A3) \
	STORE4(W, 0, DI, A0, A1, A2, A3) \
	ADDQ   $(4*W), DI \
	SUBQ   $(W/2), CX \
	JMP    blk4 \
blk1: \
	CMPQ    CX, $(W/8) \
	JLT     done \
	VMOVUPD (DI), A0 \
	XORQ    BX, BX \
src1: \
	PANELSRC(C, end1) \
	VMULPD  (R12), C, P0 \
	VSUBPD  P0, A0, A0 \
	INCQ    BX \
	JMP     src1 \
end1: \
	VMULPD  S, A0, A0 \
	VMOVUPD A0, (DI) \
	ADDQ    $W, DI \
	SUBQ    $(W/8), CX \
	JMP     blk1 \
done: \
	VZEROUPPER \
	RET

// SUBC2(M, A, B) subtracts A from the 4-wide vector of c at the memory
// operand M and B from the one 32 bytes on (32 M: M with a 32-byte offset),
// through Y8 and Y9: one row of gerUpdAVX2's 4 × 8 block.
#define SUBC2(M, A, B) \
	VMOVUPD M, Y8 \
	VSUBPD  A, Y8, Y8 \
	VMOVUPD Y8, M \
	VMOVUPD 32 M, Y9 \
	VSUBPD  B, Y9, Y9 \
	VMOVUPD Y9, 32 M

// ROWFMA2(X, A0, A1): A0 += X·Y12 and A1 += X·Y13 (fused multiply-adds):
// one row of a (X) against the two columns of syrkRow4AVX2's pair.
#define ROWFMA2(X, A0, A1) \
	VFMADD231PD X, Y12, A0 \
	VFMADD231PD X, Y13, A1

// QUADFMA2(M, B, A0, A1): B ← the four values of a row of a at M broadcast
// to both halves, A0 += B·Z10 and A1 += B·Z11 (fused multiply-adds): one row
// against the four columns of syrkRow4x4AVX512's pass.
#define QUADFMA2(M, B, A0, A1) \
	VBROADCASTF64X4 M, B \
	VFMADD231PD     B, Z10, A0 \
	VFMADD231PD     B, Z11, A1

// TAILCOL(OFF, A): A += Y7·(q's value at OFF(DI) broadcast), the product
// rounded before it is added (through Y8): one column of tailSumsAVX2.
#define TAILCOL(OFF, A) \
	VBROADCASTSD OFF(DI), Y8 \
	VMULPD       Y7, Y8, Y8 \
	VADDPD       Y8, A, A

// TAILMORE(M) ends tailSumsAVX2's panel row (to tnext) unless it has at
// least M columns (m in R9).
#define TAILMORE(M) \
	CMPQ R9, $M \
	JLT  tnext

// LANEFMA4(OFF, A, B, C, D): A += (the vector at OFF(SI))·Y8, B += (the
// next)·Y8, … for four consecutive 4-wide vectors (fused multiply-adds):
// four rows of dotLanes8PackedAVX2.
#define LANEFMA4(OFF, A, B, C, D) \
	VFMADD231PD OFF(SI), Y8, A \
	VFMADD231PD (OFF+32)(SI), Y8, B \
	VFMADD231PD (OFF+64)(SI), Y8, C \
	VFMADD231PD (OFF+96)(SI), Y8, D
