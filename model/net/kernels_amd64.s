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

// func convTiles32Vec(c *float32, cs int, p *float32, off *int, w *float32, k int, bias *float32, relu bool, nt, np int)
//
// nt × np tiles of 4×16 float32: tile (t, b) reads p + 16t, the weights
// w + 4kb and the bias + 4b, and writes c + 16t + 4b·cs; for each t the np
// panels run one after the other, so they find the inputs in the L1 cache.
// Accumulator rows i = 0..3 (output channels) in Y0/Y1, Y2/Y3, Y4/Y5,
// Y6/Y7, each holding 16 strip positions and starting at the bias; per term
// κ the 16 inputs at p + off[κ] are multiplied by the broadcast weights
// w[4κ+i].
TEXT ·convTiles32Vec(SB), NOSPLIT, $0-80
	MOVQ c+0(FP), DI
	MOVQ cs+8(FP), R8
	SHLQ $2, R8
	MOVQ p+16(FP), SI
	MOVQ off+24(FP), R12
	MOVQ w+32(FP), R13
	MOVQ nt+64(FP), R11
	VXORPS Y15, Y15, Y15

tile32:
	MOVQ R13, AX
	MOVQ bias+48(FP), R10
	MOVQ DI, R14
	MOVQ np+72(FP), DX

panel32:
	VBROADCASTSS 0(R10), Y0
	VMOVAPS Y0, Y1
	VBROADCASTSS 4(R10), Y2
	VMOVAPS Y2, Y3
	VBROADCASTSS 8(R10), Y4
	VMOVAPS Y4, Y5
	VBROADCASTSS 12(R10), Y6
	VMOVAPS Y6, Y7
	MOVQ R12, BX
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

	MOVBLZX relu+56(FP), R9
	TESTQ R9, R9
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
	MOVQ R14, R9
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
	// Next panel: AX is at its weights already; the bias and 4 rows of c on.
	LEAQ (R9)(R8*1), R14
	ADDQ $16, R10
	DECQ DX
	JNZ panel32

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

// BSUMSET sets the lane-wise products of one row of a block (Y3 U·U, Y4
// V·V, Y5 U·V, Y6 U·swap V, Y9 S·M, Y10 S·swap M) and BSUMADD adds them: U
// at PU, the mirrored pair at PV (reversed here), M at PM; Y15 the
// conjugation mask.
#define BSUMSET(PU, PV, PM) \
	VMOVUPD PU, Y0 \
	VPERMPD $0x4e, PV, Y1 \
	VMOVUPD PM, Y2 \
	VMULPD Y0, Y0, Y3 \
	VMULPD Y1, Y1, Y4 \
	VMULPD Y1, Y0, Y5 \
	VPERMILPD $5, Y1, Y7 \
	VMULPD Y7, Y0, Y6 \
	VXORPD Y15, Y1, Y8 \
	VADDPD Y8, Y0, Y8 \
	VMULPD Y2, Y8, Y9 \
	VPERMILPD $5, Y2, Y0 \
	VMULPD Y0, Y8, Y10

#define BSUMADD(PU, PV, PM) \
	VMOVUPD PU, Y0 \
	VPERMPD $0x4e, PV, Y1 \
	VMOVUPD PM, Y2 \
	VFMADD231PD Y0, Y0, Y3 \
	VFMADD231PD Y1, Y1, Y4 \
	VFMADD231PD Y1, Y0, Y5 \
	VPERMILPD $5, Y1, Y7 \
	VFMADD231PD Y7, Y0, Y6 \
	VXORPD Y15, Y1, Y8 \
	VADDPD Y8, Y0, Y8 \
	VFMADD231PD Y2, Y8, Y9 \
	VPERMILPD $5, Y2, Y0 \
	VFMADD231PD Y0, Y8, Y10

// RATIOS4 computes the five ratios of four blocks from the sums at
// (BX): a1, a2, re, −ti, im, tr at strides of R13 bytes (R14 = 4·R13), pm
// in the register PMV, into Y0..Y4 (re/q, im/q, (a1−a2)/(2q), tr/r, ti/r); k at AX:
// reg, 0.5, 0.25, 1, −0 broadcast.
#define RATIOS4(PMV) \
	VMOVUPD (BX), Y5 \
	VMOVUPD (BX)(R13*1), Y6 \
	VADDPD Y6, Y5, Y7 \
	VSUBPD Y6, Y5, Y8 \
	VMULPD 32(AX), Y8, Y8 \
	VMULPD 32(AX), Y7, Y9 \
	VADDPD (AX), Y9, Y9 \
	VMOVUPD (BX)(R13*2), Y10 \
	VADDPD Y10, Y10, Y11 \
	VADDPD Y11, Y7, Y11 \
	VMULPD 64(AX), Y11, Y11 \
	VADDPD PMV, Y11, Y11 \
	VADDPD (AX), Y11, Y11 \
	VMULPD Y11, Y9, Y12 \
	VMOVUPD 96(AX), Y13 \
	VDIVPD Y12, Y13, Y12 \
	VMULPD Y12, Y11, Y13 \
	VMULPD Y12, Y9, Y12 \
	VXORPD Y14, Y14, Y14 \
	VCMPPD $6, Y14, Y9, Y9 \
	VCMPPD $6, Y14, Y11, Y11 \
	VANDPD Y11, Y9, Y9 \
	VANDPD Y9, Y13, Y13 \
	VANDPD Y9, Y12, Y12 \
	VMULPD Y13, Y10, Y0 \
	VMULPD (BX)(R14*1), Y13, Y1 \
	VMULPD Y13, Y8, Y2 \
	ADDQ R13, BX \
	VMULPD (BX)(R14*1), Y12, Y3 \
	VMULPD (BX)(R13*2), Y12, Y4 \
	SUBQ R13, BX \
	VXORPD 128(AX), Y4, Y4

// tailmask<> + 32r: the lane mask of the last r blocks of a segment.
DATA tailmask<>+32(SB)/8, $-1
DATA tailmask<>+64(SB)/8, $-1
DATA tailmask<>+72(SB)/8, $-1
DATA tailmask<>+96(SB)/8, $-1
DATA tailmask<>+104(SB)/8, $-1
DATA tailmask<>+112(SB)/8, $-1
GLOBL tailmask<>(SB), RODATA|NOPTR, $128

// func spectralVec(out *float64, plane int, z, mean *complex128, pm, tmp *float64, stride int, k *[5][4]float64, segs *[6]int, nseg int)
//
// The five ratio channels (the sums of Featurizer.blockScalar and the ratios
// of Featurizer.finish) of the blocks of nseg ≥ 1 segments, each a run of
// nb ≥ 1 consecutive 2×2 blocks: segs[i] = byte offsets of the first
// block's rows U0, U1 (into z and mean), of its mirrored pairs V0, V1 (into
// z), of its output (into out and pm), and nb. Pass 1, per block, rows
// r = 0, 1: U = (u_r[0], u_r[1]), V = (v_r[1], v_r[0]) (the mirrored pair,
// stored in reverse), M = (m_r[0], m_r[1]), S = U + conj V; the lane-wise
// sums of U·U, V·V, U·V, U·swap(V), S·M, S·swap(M) are reduced to a1 =
// Σ|Z|², a2 = Σ|Z₋|², re, im of Σ Z Z₋ and tr, ti of Σ S M*, stored at
// tmp + c·stride (c = a1, a2, re, −ti, im, tr; stride in bytes, room for
// nb rounded up to 4). u and m advance by one pair per block, v goes back
// by one. Pass 2, four blocks at a time: Σ|S|² = a1 + a2 + 2 re, q =
// (a1+a2)/2 + reg, r = Σ|S|²/4 + pm + reg and, unless q ≤ 0 or r ≤ 0
// (zeros then), out[i + c·plane] for c = 0..4 = re/q, im/q, (a1−a2)/(2q),
// tr/r, ti/r (plane in bytes); the last nb mod 4 blocks under a lane mask.
// k holds reg, 0.5, 0.25, 1 and −0, each in four lanes.
TEXT ·spectralVec(SB), NOSPLIT, $0-80
sseg:
	MOVQ segs+64(FP), AX
	MOVQ z+16(FP), DX
	MOVQ (AX), R8
	ADDQ DX, R8
	MOVQ 8(AX), R9
	ADDQ DX, R9
	MOVQ 16(AX), R10
	ADDQ DX, R10
	MOVQ 24(AX), R11
	ADDQ DX, R11
	MOVQ mean+24(FP), DX
	MOVQ (AX), R12
	ADDQ DX, R12
	MOVQ 8(AX), SI
	ADDQ DX, SI
	MOVQ 40(AX), CX
	MOVQ tmp+40(FP), BX
	MOVQ stride+48(FP), R13
	LEAQ (R13)(R13*2), R14
	VMOVUPD negodd<>(SB), Y15

sloop:
	BSUMSET((R8), (R10), (R12))
	BSUMADD((R9), (R11), (SI))
	VHADDPD Y4, Y3, Y3
	VHSUBPD Y10, Y5, Y5
	VHADDPD Y9, Y6, Y6
	VEXTRACTF128 $1, Y3, X0
	VADDPD X0, X3, X3
	VEXTRACTF128 $1, Y5, X0
	VADDPD X0, X5, X5
	VEXTRACTF128 $1, Y6, X0
	VADDPD X0, X6, X6
	VMOVLPD X3, (BX)
	VMOVHPD X3, (BX)(R13*1)
	VMOVLPD X5, (BX)(R13*2)
	VMOVHPD X5, (BX)(R14*1)
	LEAQ (BX)(R13*4), DX
	VMOVLPD X6, (DX)
	VMOVHPD X6, (DX)(R13*1)
	ADDQ $8, BX
	ADDQ $32, R8
	ADDQ $32, R9
	ADDQ $32, R12
	ADDQ $32, SI
	SUBQ $32, R10
	SUBQ $32, R11
	DECQ CX
	JNZ sloop

	// Pass 2. R14 = 4·stride: from a1 to im, and from a2 to tr.
	MOVQ segs+64(FP), AX
	MOVQ 32(AX), R9
	MOVQ 40(AX), R10
	MOVQ out+0(FP), DI
	ADDQ R9, DI
	MOVQ pm+32(FP), SI
	ADDQ R9, SI
	MOVQ plane+8(FP), DX
	LEAQ (DX)(DX*2), R8
	MOVQ tmp+40(FP), BX
	LEAQ (R13*4), R14
	MOVQ k+56(FP), AX
	MOVQ R10, CX
	SHRQ $2, CX
	JZ rtail

rloop:
	VMOVUPD (SI), Y15
	RATIOS4(Y15)
	VMOVUPD Y0, (DI)
	VMOVUPD Y1, (DI)(DX*1)
	VMOVUPD Y2, (DI)(DX*2)
	VMOVUPD Y3, (DI)(R8*1)
	VMOVUPD Y4, (DI)(DX*4)
	ADDQ $32, DI
	ADDQ $32, SI
	ADDQ $32, BX
	DECQ CX
	JNZ rloop

rtail:
	ANDQ $3, R10
	JZ rnext
	SHLQ $5, R10
	LEAQ tailmask<>(SB), R9
	ADDQ R10, R9
	VMOVUPD (R9), Y15
	VMASKMOVPD (SI), Y15, Y15
	RATIOS4(Y15)
	VMOVUPD (R9), Y5
	VMASKMOVPD Y0, Y5, (DI)
	VMASKMOVPD Y1, Y5, (DI)(DX*1)
	VMASKMOVPD Y2, Y5, (DI)(DX*2)
	VMASKMOVPD Y3, Y5, (DI)(R8*1)
	VMASKMOVPD Y4, Y5, (DI)(DX*4)

rnext:
	ADDQ $48, segs+64(FP)
	DECQ nseg+72(FP)
	JNZ sseg
	VZEROUPPER
	RET

// PACK4 writes z = w·(d1 − m1) + i w·(d2 − m2) for four pixels: d1 in D1,
// d2 in D2, the window at W, z at Z; k (m1, m2 broadcast) at AX.
#define PACK4(D1, D2, W, Z, Z2) \
	VSUBPD (AX), D1, Y4 \
	VMULPD W, Y4, Y4 \
	VSUBPD 32(AX), D2, Y5 \
	VMULPD W, Y5, Y5 \
	VUNPCKLPD Y5, Y4, Y6 \
	VUNPCKHPD Y5, Y4, Y7 \
	VPERM2F128 $0x20, Y7, Y6, Y8 \
	VPERM2F128 $0x31, Y7, Y6, Y9 \
	VMOVUPD Y8, Z \
	VMOVUPD Y9, Z2

// func packBin2Vec(z *complex128, d1, d2, w *float64, n, rows2 int, k *[5][4]float64, b1, b2 *float64)
//
// For 2·rows2 ≥ 2 rows of n pixels (n a multiple of 8): z = w·(d1 − m1) +
// i w·(d2 − m2), and the 2×2 block sums of d1 − bm1 and d2 − bm2 times inv
// into b1 and b2 (n/2 per block row), with k = {m1, m2, bm1, bm2, inv},
// each broadcast to four lanes.
TEXT ·packBin2Vec(SB), NOSPLIT, $0-72
	MOVQ z+0(FP), DI
	MOVQ d1+8(FP), SI
	MOVQ d2+16(FP), BX
	MOVQ w+24(FP), R8
	MOVQ n+32(FP), R9
	SHLQ $3, R9
	MOVQ k+48(FP), AX
	MOVQ b1+56(FP), R10
	MOVQ b2+64(FP), R11

prow:
	XORQ CX, CX

pcol:
	// Row 2r: pixels CX/8 … CX/8+7.
	VMOVUPD (SI)(CX*1), Y0
	VMOVUPD 32(SI)(CX*1), Y1
	VMOVUPD (BX)(CX*1), Y2
	VMOVUPD 32(BX)(CX*1), Y3
	VSUBPD 64(AX), Y0, Y10
	VSUBPD 64(AX), Y1, Y11
	VSUBPD 96(AX), Y2, Y12
	VSUBPD 96(AX), Y3, Y13
	LEAQ (R8)(CX*1), R12
	LEAQ (DI)(CX*2), R13
	PACK4(Y0, Y2, (R12), (R13), 32(R13))
	PACK4(Y1, Y3, 32(R12), 64(R13), 96(R13))

	// Row 2r+1.
	LEAQ (SI)(R9*1), DX
	VMOVUPD (DX)(CX*1), Y0
	VMOVUPD 32(DX)(CX*1), Y1
	LEAQ (BX)(R9*1), DX
	VMOVUPD (DX)(CX*1), Y2
	VMOVUPD 32(DX)(CX*1), Y3
	VSUBPD 64(AX), Y0, Y4
	VADDPD Y4, Y10, Y10
	VSUBPD 64(AX), Y1, Y4
	VADDPD Y4, Y11, Y11
	VSUBPD 96(AX), Y2, Y4
	VADDPD Y4, Y12, Y12
	VSUBPD 96(AX), Y3, Y4
	VADDPD Y4, Y13, Y13
	ADDQ R9, R12
	LEAQ (R13)(R9*2), R13
	PACK4(Y0, Y2, (R12), (R13), 32(R13))
	PACK4(Y1, Y3, 32(R12), 64(R13), 96(R13))

	// Block sums: the horizontal add leaves the blocks in lanes 0, 2, 1, 3.
	VHADDPD Y11, Y10, Y10
	VPERMPD $0xd8, Y10, Y10
	VMULPD 128(AX), Y10, Y10
	VHADDPD Y13, Y12, Y12
	VPERMPD $0xd8, Y12, Y12
	VMULPD 128(AX), Y12, Y12
	MOVQ CX, DX
	SHRQ $1, DX
	VMOVUPD Y10, (R10)(DX*1)
	VMOVUPD Y12, (R11)(DX*1)
	ADDQ $64, CX
	CMPQ CX, R9
	JLT pcol

	// Next row pair.
	LEAQ (SI)(R9*2), SI
	LEAQ (BX)(R9*2), BX
	LEAQ (R8)(R9*2), R8
	LEAQ (DI)(R9*4), DI
	MOVQ R9, DX
	SHRQ $1, DX
	ADDQ DX, R10
	ADDQ DX, R11
	DECQ rows2+40(FP)
	JNZ prow
	VZEROUPPER
	RET

// func sums2Vec(acc, d1, d2 *float64, n int, out *[2]float64)
//
// acc[i] += d1[i] for i < n, out = (Σ d1, Σ d2); n a positive multiple of
// 8. Eight partial sums per image (two vectors), added pairwise at the end.
TEXT ·sums2Vec(SB), NOSPLIT, $0-40
	MOVQ acc+0(FP), DI
	MOVQ d1+8(FP), SI
	MOVQ d2+16(FP), BX
	MOVQ n+24(FP), CX
	SHRQ $3, CX
	VXORPD Y4, Y4, Y4
	VXORPD Y5, Y5, Y5
	VXORPD Y6, Y6, Y6
	VXORPD Y7, Y7, Y7

s2loop:
	VMOVUPD (SI), Y0
	VMOVUPD 32(SI), Y1
	VADDPD Y0, Y4, Y4
	VADDPD Y1, Y5, Y5
	VADDPD (DI), Y0, Y0
	VADDPD 32(DI), Y1, Y1
	VMOVUPD Y0, (DI)
	VMOVUPD Y1, 32(DI)
	VADDPD (BX), Y6, Y6
	VADDPD 32(BX), Y7, Y7
	ADDQ $64, SI
	ADDQ $64, DI
	ADDQ $64, BX
	DECQ CX
	JNZ s2loop

	MOVQ out+32(FP), DX
	VADDPD Y5, Y4, Y4
	VADDPD Y7, Y6, Y6
	VHADDPD Y6, Y4, Y4
	VEXTRACTF128 $1, Y4, X0
	VADDPD X0, X4, X4
	VMOVUPD X4, (DX)
	VZEROUPPER
	RET

// func sumSqVec(x *float64, m float64, n int) float64
//
// Σ (x[i] − m)² for i < n, n a positive multiple of 8; eight partial sums.
TEXT ·sumSqVec(SB), NOSPLIT, $0-32
	MOVQ x+0(FP), SI
	VBROADCASTSD m+8(FP), Y3
	MOVQ n+16(FP), CX
	SHRQ $3, CX
	VXORPD Y4, Y4, Y4
	VXORPD Y5, Y5, Y5

sqloop:
	VSUBPD (SI), Y3, Y0
	VSUBPD 32(SI), Y3, Y1
	VFMADD231PD Y0, Y0, Y4
	VFMADD231PD Y1, Y1, Y5
	ADDQ $64, SI
	DECQ CX
	JNZ sqloop

	VADDPD Y5, Y4, Y4
	VEXTRACTF128 $1, Y4, X0
	VADDPD X0, X4, X4
	VHADDPD X4, X4, X4
	VMOVSD X4, ret+24(FP)
	VZEROUPPER
	RET
