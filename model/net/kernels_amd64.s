//go:build amd64 && !purego

#include "textflag.h"

// func convTileVec(c *float64, cs int, p *float64, off *int, w *float64, k int, bias *[4]float64, relu bool)
//
// A 4×8 tile: accumulator rows i = 0..3 (output channels) in Y0/Y1, Y2/Y3,
// Y4/Y5, Y6/Y7, each holding 8 strip positions; per term κ the 8 inputs at
// p + off[κ] are multiplied by the broadcast weights w[4κ+i].
TEXT ·convTileVec(SB), NOSPLIT, $0-57
	MOVQ c+0(FP), DI
	MOVQ cs+8(FP), R8
	MOVQ p+16(FP), SI
	MOVQ off+24(FP), BX
	MOVQ w+32(FP), AX
	MOVQ k+40(FP), CX
	MOVQ bias+48(FP), DX
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
	VXORPD Y2, Y2, Y2
	VXORPD Y3, Y3, Y3
	VXORPD Y4, Y4, Y4
	VXORPD Y5, Y5, Y5
	VXORPD Y6, Y6, Y6
	VXORPD Y7, Y7, Y7

loop:
	MOVQ (BX), R9
	VMOVUPD (SI)(R9*1), Y8
	VMOVUPD 32(SI)(R9*1), Y9
	VBROADCASTSD 0(AX), Y10
	VFMADD231PD Y8, Y10, Y0
	VFMADD231PD Y9, Y10, Y1
	VBROADCASTSD 8(AX), Y11
	VFMADD231PD Y8, Y11, Y2
	VFMADD231PD Y9, Y11, Y3
	VBROADCASTSD 16(AX), Y12
	VFMADD231PD Y8, Y12, Y4
	VFMADD231PD Y9, Y12, Y5
	VBROADCASTSD 24(AX), Y13
	VFMADD231PD Y8, Y13, Y6
	VFMADD231PD Y9, Y13, Y7
	ADDQ $8, BX
	ADDQ $32, AX
	DECQ CX
	JNZ loop

	// Bias after the sum, as the scalar path.
	VBROADCASTSD 0(DX), Y10
	VADDPD Y10, Y0, Y0
	VADDPD Y10, Y1, Y1
	VBROADCASTSD 8(DX), Y11
	VADDPD Y11, Y2, Y2
	VADDPD Y11, Y3, Y3
	VBROADCASTSD 16(DX), Y12
	VADDPD Y12, Y4, Y4
	VADDPD Y12, Y5, Y5
	VBROADCASTSD 24(DX), Y13
	VADDPD Y13, Y6, Y6
	VADDPD Y13, Y7, Y7

	MOVBLZX relu+56(FP), R10
	TESTQ R10, R10
	JZ store
	// max(0, v) with v as the second source: NaN and −0 pass through,
	// as `if v < 0 { v = 0 }` does.
	VXORPD Y15, Y15, Y15
	VMAXPD Y0, Y15, Y0
	VMAXPD Y1, Y15, Y1
	VMAXPD Y2, Y15, Y2
	VMAXPD Y3, Y15, Y3
	VMAXPD Y4, Y15, Y4
	VMAXPD Y5, Y15, Y5
	VMAXPD Y6, Y15, Y6
	VMAXPD Y7, Y15, Y7

store:
	SHLQ $3, R8
	VMOVUPD Y0, (DI)
	VMOVUPD Y1, 32(DI)
	ADDQ R8, DI
	VMOVUPD Y2, (DI)
	VMOVUPD Y3, 32(DI)
	ADDQ R8, DI
	VMOVUPD Y4, (DI)
	VMOVUPD Y5, 32(DI)
	ADDQ R8, DI
	VMOVUPD Y6, (DI)
	VMOVUPD Y7, 32(DI)
	VZEROUPPER
	RET

// Sign mask negating the odd (imaginary) lanes: conj of two complex128.
DATA negodd<>+0(SB)/8, $0x0000000000000000
DATA negodd<>+8(SB)/8, $0x8000000000000000
DATA negodd<>+16(SB)/8, $0x0000000000000000
DATA negodd<>+24(SB)/8, $0x8000000000000000
GLOBL negodd<>(SB), RODATA|NOPTR, $32

// func blockSums2Vec(out *float64, u0, u1, v0, v1, m0, m1 *complex128, nb int)
//
// Per block, rows r = 0, 1: U = (u_r[0], u_r[1]), V = (v_r[1], v_r[0])
// (the mirrored pair, stored in reverse), M = (m_r[0], m_r[1]),
// S = U + conj V; the lane-wise sums over both rows of U·U, V·V, U·V,
// U·swap(V), S·S, S·M, S·swap(M) are stored, 7 × 4 values. u and m advance
// by one pair per block, v goes back by one.
TEXT ·blockSums2Vec(SB), NOSPLIT, $0-64
	MOVQ out+0(FP), DI
	MOVQ u0+8(FP), R8
	MOVQ u1+16(FP), R9
	MOVQ v0+24(FP), R10
	MOVQ v1+32(FP), R11
	MOVQ m0+40(FP), R12
	MOVQ m1+48(FP), R13
	MOVQ nb+56(FP), CX
	VMOVUPD negodd<>(SB), Y15

bloop:
	VMOVUPD (R8), Y0
	VPERMPD $0x4e, (R10), Y1
	VMOVUPD (R12), Y2
	VMULPD Y0, Y0, Y3
	VMULPD Y1, Y1, Y4
	VMULPD Y1, Y0, Y5
	VPERMILPD $5, Y1, Y11
	VMULPD Y11, Y0, Y6
	VXORPD Y15, Y1, Y12
	VADDPD Y12, Y0, Y12
	VMULPD Y12, Y12, Y8
	VMULPD Y2, Y12, Y9
	VPERMILPD $5, Y2, Y13
	VMULPD Y13, Y12, Y10

	VMOVUPD (R9), Y0
	VPERMPD $0x4e, (R11), Y1
	VMOVUPD (R13), Y2
	VFMADD231PD Y0, Y0, Y3
	VFMADD231PD Y1, Y1, Y4
	VFMADD231PD Y1, Y0, Y5
	VPERMILPD $5, Y1, Y11
	VFMADD231PD Y11, Y0, Y6
	VXORPD Y15, Y1, Y12
	VADDPD Y12, Y0, Y12
	VFMADD231PD Y12, Y12, Y8
	VFMADD231PD Y2, Y12, Y9
	VPERMILPD $5, Y2, Y13
	VFMADD231PD Y13, Y12, Y10

	VMOVUPD Y3, 0(DI)
	VMOVUPD Y4, 32(DI)
	VMOVUPD Y5, 64(DI)
	VMOVUPD Y6, 96(DI)
	VMOVUPD Y8, 128(DI)
	VMOVUPD Y9, 160(DI)
	VMOVUPD Y10, 192(DI)
	ADDQ $224, DI
	ADDQ $32, R8
	ADDQ $32, R9
	ADDQ $32, R12
	ADDQ $32, R13
	SUBQ $32, R10
	SUBQ $32, R11
	DECQ CX
	JNZ bloop
	VZEROUPPER
	RET

// func convTiles32Vec(c *float32, cs int, p *float32, off *int, w *float32, k int, bias *[4]float32, relu bool, nt int)
//
// nt tiles of 4×16 float32: accumulator rows i = 0..3 (output channels) in
// Y0/Y1, Y2/Y3, Y4/Y5, Y6/Y7, each holding 16 strip positions and starting
// at the bias; per term κ the 16 inputs at p + off[κ] are multiplied by the
// broadcast weights w[4κ+i].
TEXT ·convTiles32Vec(SB), NOSPLIT, $0-72
	MOVQ c+0(FP), DI
	MOVQ cs+8(FP), R8
	SHLQ $2, R8
	MOVQ p+16(FP), SI
	MOVQ off+24(FP), R12
	MOVQ w+32(FP), R13
	MOVQ bias+48(FP), DX
	MOVQ nt+64(FP), R11
	VXORPS Y15, Y15, Y15

tile32:
	VBROADCASTSS 0(DX), Y0
	VMOVAPS Y0, Y1
	VBROADCASTSS 4(DX), Y2
	VMOVAPS Y2, Y3
	VBROADCASTSS 8(DX), Y4
	VMOVAPS Y4, Y5
	VBROADCASTSS 12(DX), Y6
	VMOVAPS Y6, Y7
	MOVQ R12, BX
	MOVQ R13, AX
	MOVQ k+40(FP), CX

loop32:
	MOVQ (BX), R9
	VMOVUPS (SI)(R9*1), Y8
	VMOVUPS 32(SI)(R9*1), Y9
	VBROADCASTSS 0(AX), Y10
	VFMADD231PS Y8, Y10, Y0
	VFMADD231PS Y9, Y10, Y1
	VBROADCASTSS 4(AX), Y11
	VFMADD231PS Y8, Y11, Y2
	VFMADD231PS Y9, Y11, Y3
	VBROADCASTSS 8(AX), Y12
	VFMADD231PS Y8, Y12, Y4
	VFMADD231PS Y9, Y12, Y5
	VBROADCASTSS 12(AX), Y13
	VFMADD231PS Y8, Y13, Y6
	VFMADD231PS Y9, Y13, Y7
	ADDQ $8, BX
	ADDQ $16, AX
	DECQ CX
	JNZ loop32

	MOVBLZX relu+56(FP), R10
	TESTQ R10, R10
	JZ store32
	// max(0, v) with v as the second source: NaN and −0 pass through,
	// as `if v < 0 { v = 0 }` does.
	VMAXPS Y0, Y15, Y0
	VMAXPS Y1, Y15, Y1
	VMAXPS Y2, Y15, Y2
	VMAXPS Y3, Y15, Y3
	VMAXPS Y4, Y15, Y4
	VMAXPS Y5, Y15, Y5
	VMAXPS Y6, Y15, Y6
	VMAXPS Y7, Y15, Y7

store32:
	MOVQ DI, R9
	VMOVUPS Y0, (R9)
	VMOVUPS Y1, 32(R9)
	ADDQ R8, R9
	VMOVUPS Y2, (R9)
	VMOVUPS Y3, 32(R9)
	ADDQ R8, R9
	VMOVUPS Y4, (R9)
	VMOVUPS Y5, 32(R9)
	ADDQ R8, R9
	VMOVUPS Y6, (R9)
	VMOVUPS Y7, 32(R9)
	ADDQ $64, DI
	ADDQ $64, SI
	DECQ R11
	JNZ tile32
	VZEROUPPER
	RET

// func split64to32Vec(ev, od *float32, src *float64, n int)
//
// ev[i] = src[2i], od[i] = src[2i+1] rounded to float32, for i < 4n: per
// step eight values are converted in two halves and the halves shuffled
// into their even and odd lanes.
TEXT ·split64to32Vec(SB), NOSPLIT, $0-32
	MOVQ ev+0(FP), DI
	MOVQ od+8(FP), R8
	MOVQ src+16(FP), SI
	MOVQ n+24(FP), CX

s64loop:
	VCVTPD2PSY (SI), X0
	VCVTPD2PSY 32(SI), X1
	VSHUFPS $0x88, X1, X0, X2
	VSHUFPS $0xdd, X1, X0, X3
	VMOVUPS X2, (DI)
	VMOVUPS X3, (R8)
	ADDQ $64, SI
	ADDQ $16, DI
	ADDQ $16, R8
	DECQ CX
	JNZ s64loop
	VZEROUPPER
	RET

// func split32Vec(ev, od *float32, src *float32, n int)
//
// ev[i] = src[2i], od[i] = src[2i+1] for i < 4n.
TEXT ·split32Vec(SB), NOSPLIT, $0-32
	MOVQ ev+0(FP), DI
	MOVQ od+8(FP), R8
	MOVQ src+16(FP), SI
	MOVQ n+24(FP), CX

s32loop:
	VMOVUPS (SI), X0
	VMOVUPS 16(SI), X1
	VSHUFPS $0x88, X1, X0, X2
	VSHUFPS $0xdd, X1, X0, X3
	VMOVUPS X2, (DI)
	VMOVUPS X3, (R8)
	ADDQ $32, SI
	ADDQ $16, DI
	ADDQ $16, R8
	DECQ CX
	JNZ s32loop
	RET

// func splitImage64Vec(dst *float32, src *float64, rows, q, rs, plane int)
//
// The phase split of an image of 2·rows rows of 8q float64 (row-major,
// contiguous): row 2r goes to the phase planes at dst + r·rs (even
// columns) and dst + plane + r·rs (odd columns), row 2r+1 to dst + 2·plane
// + r·rs and dst + 3·plane + r·rs; rs and plane are in bytes. Values are
// rounded to float32; rows, q ≥ 1.
TEXT ·splitImage64Vec(SB), NOSPLIT, $0-48
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ rows+16(FP), DX
	MOVQ q+24(FP), R10
	MOVQ rs+32(FP), R8
	MOVQ plane+40(FP), R9

irow:
	MOVQ DI, AX
	LEAQ (DI)(R9*1), BX
	MOVQ R10, CX

ieven:
	VCVTPD2PSY (SI), X0
	VCVTPD2PSY 32(SI), X1
	VSHUFPS $0x88, X1, X0, X2
	VSHUFPS $0xdd, X1, X0, X3
	VMOVUPS X2, (AX)
	VMOVUPS X3, (BX)
	ADDQ $64, SI
	ADDQ $16, AX
	ADDQ $16, BX
	DECQ CX
	JNZ ieven

	LEAQ (DI)(R9*2), AX
	LEAQ (AX)(R9*1), BX
	MOVQ R10, CX

iodd:
	VCVTPD2PSY (SI), X0
	VCVTPD2PSY 32(SI), X1
	VSHUFPS $0x88, X1, X0, X2
	VSHUFPS $0xdd, X1, X0, X3
	VMOVUPS X2, (AX)
	VMOVUPS X3, (BX)
	ADDQ $64, SI
	ADDQ $16, AX
	ADDQ $16, BX
	DECQ CX
	JNZ iodd

	ADDQ R8, DI
	DECQ DX
	JNZ irow
	VZEROUPPER
	RET

// func splitStrip32Vec(ev, od *float32, src *float32, frames, q, so, do int)
//
// For f < frames: ev[f·do + i] = src[f·so + 2i], od[f·do + i] =
// src[f·so + 2i + 1] for i < 4q (strides in elements); frames, q ≥ 1.
TEXT ·splitStrip32Vec(SB), NOSPLIT, $0-56
	MOVQ ev+0(FP), DI
	MOVQ od+8(FP), R8
	MOVQ src+16(FP), SI
	MOVQ frames+24(FP), DX
	MOVQ q+32(FP), R10
	MOVQ so+40(FP), R11
	SHLQ $2, R11
	MOVQ do+48(FP), R12
	SHLQ $2, R12

sframe:
	MOVQ DI, AX
	MOVQ R8, BX
	MOVQ SI, R9
	MOVQ R10, CX

sgroup:
	VMOVUPS (R9), X0
	VMOVUPS 16(R9), X1
	VSHUFPS $0x88, X1, X0, X2
	VSHUFPS $0xdd, X1, X0, X3
	VMOVUPS X2, (AX)
	VMOVUPS X3, (BX)
	ADDQ $32, R9
	ADDQ $16, AX
	ADDQ $16, BX
	DECQ CX
	JNZ sgroup

	ADDQ R12, DI
	ADDQ R12, R8
	ADDQ R11, SI
	DECQ DX
	JNZ sframe
	RET
