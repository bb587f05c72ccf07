//go:build amd64 && !purego

#include "textflag.h"

// Sign mask negating the odd (imaginary) lanes of a YMM register.
DATA negodd<>+0(SB)/8, $0x0000000000000000
DATA negodd<>+8(SB)/8, $0x8000000000000000
DATA negodd<>+16(SB)/8, $0x0000000000000000
DATA negodd<>+24(SB)/8, $0x8000000000000000
GLOBL negodd<>(SB), RODATA|NOPTR, $32

// Sign mask negating the even (real) lanes.
DATA negeven<>+0(SB)/8, $0x8000000000000000
DATA negeven<>+8(SB)/8, $0x0000000000000000
DATA negeven<>+16(SB)/8, $0x8000000000000000
DATA negeven<>+24(SB)/8, $0x0000000000000000
GLOBL negeven<>(SB), RODATA|NOPTR, $32

// A YMM register holds two complex128 values (re0, im0, re1, im1).
// Complex product z·w with w broadcast as WR = (wr, wr, wr, wr) and
// WI = (-wi, wi, -wi, wi):  z·w = z*WR + swap(z)*WI, swap = VPERMILPD $5.

// func r4vec(y0, y1, y2, y3, x0, x1, x2, x3 *complex128, n int, w *[3]complex128)
TEXT ·r4vec(SB), NOSPLIT, $0-80
	MOVQ y0+0(FP), DI
	MOVQ y1+8(FP), SI
	MOVQ y2+16(FP), BX
	MOVQ y3+24(FP), DX
	MOVQ x0+32(FP), R8
	MOVQ x1+40(FP), R9
	MOVQ x2+48(FP), R10
	MOVQ x3+56(FP), R11
	MOVQ n+64(FP), CX
	MOVQ w+72(FP), AX
	SHLQ $4, CX // bytes
	VMOVUPD negeven<>(SB), Y14
	VBROADCASTSD 0(AX), Y8
	VBROADCASTSD 8(AX), Y9
	VXORPD Y14, Y9, Y9
	VBROADCASTSD 16(AX), Y10
	VBROADCASTSD 24(AX), Y11
	VXORPD Y14, Y11, Y11
	VBROADCASTSD 32(AX), Y12
	VBROADCASTSD 40(AX), Y13
	VXORPD Y14, Y13, Y13
	VMOVUPD negodd<>(SB), Y14
	XORQ AX, AX

r4loop:
	VMOVUPD (R8)(AX*1), Y0
	VMOVUPD (R9)(AX*1), Y1
	VMOVUPD (R10)(AX*1), Y2
	VMOVUPD (R11)(AX*1), Y3
	VADDPD Y2, Y0, Y4 // t0 = a0+a2
	VSUBPD Y2, Y0, Y5 // t1 = a0-a2
	VADDPD Y3, Y1, Y6 // t2 = a1+a3
	VSUBPD Y3, Y1, Y7 // d = a1-a3
	VPERMILPD $5, Y7, Y7
	VXORPD Y14, Y7, Y7 // t3 = -i·d
	VADDPD Y6, Y4, Y0 // b0 = t0+t2
	VMOVUPD Y0, (DI)(AX*1)
	VSUBPD Y6, Y4, Y0 // b2 = t0-t2
	VADDPD Y7, Y5, Y1 // b1 = t1+t3
	VSUBPD Y7, Y5, Y2 // b3 = t1-t3
	VPERMILPD $5, Y1, Y3
	VMULPD Y8, Y1, Y1
	VFMADD231PD Y9, Y3, Y1
	VMOVUPD Y1, (SI)(AX*1)
	VPERMILPD $5, Y0, Y3
	VMULPD Y10, Y0, Y0
	VFMADD231PD Y11, Y3, Y0
	VMOVUPD Y0, (BX)(AX*1)
	VPERMILPD $5, Y2, Y3
	VMULPD Y12, Y2, Y2
	VFMADD231PD Y13, Y3, Y2
	VMOVUPD Y2, (DX)(AX*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT r4loop
	VZEROUPPER
	RET

// func r4vecNoTw(y0, y1, y2, y3, x0, x1, x2, x3 *complex128, n int)
TEXT ·r4vecNoTw(SB), NOSPLIT, $0-72
	MOVQ y0+0(FP), DI
	MOVQ y1+8(FP), SI
	MOVQ y2+16(FP), BX
	MOVQ y3+24(FP), DX
	MOVQ x0+32(FP), R8
	MOVQ x1+40(FP), R9
	MOVQ x2+48(FP), R10
	MOVQ x3+56(FP), R11
	MOVQ n+64(FP), CX
	SHLQ $4, CX
	VMOVUPD negodd<>(SB), Y14
	XORQ AX, AX

r4nloop:
	VMOVUPD (R8)(AX*1), Y0
	VMOVUPD (R9)(AX*1), Y1
	VMOVUPD (R10)(AX*1), Y2
	VMOVUPD (R11)(AX*1), Y3
	VADDPD Y2, Y0, Y4
	VSUBPD Y2, Y0, Y5
	VADDPD Y3, Y1, Y6
	VSUBPD Y3, Y1, Y7
	VPERMILPD $5, Y7, Y7
	VXORPD Y14, Y7, Y7
	VADDPD Y6, Y4, Y0
	VSUBPD Y6, Y4, Y2
	VADDPD Y7, Y5, Y1
	VSUBPD Y7, Y5, Y3
	VMOVUPD Y0, (DI)(AX*1)
	VMOVUPD Y1, (SI)(AX*1)
	VMOVUPD Y2, (BX)(AX*1)
	VMOVUPD Y3, (DX)(AX*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT r4nloop
	VZEROUPPER
	RET

// func r2vec(y0, y1, x0, x1 *complex128, n int, w *complex128)
TEXT ·r2vec(SB), NOSPLIT, $0-48
	MOVQ y0+0(FP), DI
	MOVQ y1+8(FP), SI
	MOVQ x0+16(FP), R8
	MOVQ x1+24(FP), R9
	MOVQ n+32(FP), CX
	MOVQ w+40(FP), AX
	SHLQ $4, CX
	VMOVUPD negeven<>(SB), Y14
	VBROADCASTSD 0(AX), Y8
	VBROADCASTSD 8(AX), Y9
	VXORPD Y14, Y9, Y9
	XORQ AX, AX

r2loop:
	VMOVUPD (R8)(AX*1), Y0
	VMOVUPD (R9)(AX*1), Y1
	VADDPD Y1, Y0, Y2
	VSUBPD Y1, Y0, Y3
	VMOVUPD Y2, (DI)(AX*1)
	VPERMILPD $5, Y3, Y4
	VMULPD Y8, Y3, Y3
	VFMADD231PD Y9, Y4, Y3
	VMOVUPD Y3, (SI)(AX*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT r2loop
	VZEROUPPER
	RET

// func r2vecNoTw(y0, y1, x0, x1 *complex128, n int)
TEXT ·r2vecNoTw(SB), NOSPLIT, $0-40
	MOVQ y0+0(FP), DI
	MOVQ y1+8(FP), SI
	MOVQ x0+16(FP), R8
	MOVQ x1+24(FP), R9
	MOVQ n+32(FP), CX
	SHLQ $4, CX
	XORQ AX, AX

r2nloop:
	VMOVUPD (R8)(AX*1), Y0
	VMOVUPD (R9)(AX*1), Y1
	VADDPD Y1, Y0, Y2
	VSUBPD Y1, Y0, Y3
	VMOVUPD Y2, (DI)(AX*1)
	VMOVUPD Y3, (SI)(AX*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT r2nloop
	VZEROUPPER
	RET

// func r4s1vec(y, x *complex128, m int, tv *float64, mask *[4]uint64)
//
// First radix-4 stage (stride 1) vectorised over p, two values of p per
// YMM register: reads x[p+j*m], j < 4, writes y[4p+k] = w_k(p)·b_k(p).
// tv holds per pair of p the six vectors WR1, WI1, WR2, WI2, WR3, WI3
// (24 float64); mask negates the lanes that turn d into ∓i·d (forward:
// negodd, inverse: negeven). m must be even and >= 2.
TEXT ·r4s1vec(SB), NOSPLIT, $0-40
	MOVQ y+0(FP), DI
	MOVQ x+8(FP), R8
	MOVQ m+16(FP), CX
	MOVQ tv+24(FP), DX
	MOVQ mask+32(FP), AX
	VMOVUPD (AX), Y15
	MOVQ CX, BX
	SHLQ $4, BX // m*16 bytes: distance between x_j
	LEAQ (R8)(BX*1), R9
	LEAQ (R9)(BX*1), R10
	LEAQ (R10)(BX*1), R11
	SHRQ $1, CX // pairs
	XORQ AX, AX

r4s1loop:
	VMOVUPD (R8)(AX*1), Y0
	VMOVUPD (R9)(AX*1), Y1
	VMOVUPD (R10)(AX*1), Y2
	VMOVUPD (R11)(AX*1), Y3
	VADDPD Y2, Y0, Y4 // t0
	VSUBPD Y2, Y0, Y5 // t1
	VADDPD Y3, Y1, Y6 // t2
	VSUBPD Y3, Y1, Y7 // d
	VPERMILPD $5, Y7, Y7
	VXORPD Y15, Y7, Y7 // t3
	VADDPD Y6, Y4, Y0 // B0
	VSUBPD Y6, Y4, Y2 // B2
	VADDPD Y7, Y5, Y1 // B1
	VSUBPD Y7, Y5, Y3 // B3
	VPERMILPD $5, Y1, Y8
	VMULPD 0(DX), Y1, Y1
	VFMADD231PD 32(DX), Y8, Y1
	VPERMILPD $5, Y2, Y8
	VMULPD 64(DX), Y2, Y2
	VFMADD231PD 96(DX), Y8, Y2
	VPERMILPD $5, Y3, Y8
	VMULPD 128(DX), Y3, Y3
	VFMADD231PD 160(DX), Y8, Y3
	VPERM2F128 $0x20, Y1, Y0, Y4 // b0(p), b1(p)
	VPERM2F128 $0x20, Y3, Y2, Y5 // b2(p), b3(p)
	VPERM2F128 $0x31, Y1, Y0, Y6 // b0(p+1), b1(p+1)
	VPERM2F128 $0x31, Y3, Y2, Y7 // b2(p+1), b3(p+1)
	VMOVUPD Y4, 0(DI)
	VMOVUPD Y5, 32(DI)
	VMOVUPD Y6, 64(DI)
	VMOVUPD Y7, 96(DI)
	ADDQ $128, DI
	ADDQ $192, DX
	ADDQ $32, AX
	DECQ CX
	JNZ r4s1loop
	VZEROUPPER
	RET

// Radix-3 and radix-5 constants, broadcast.
DATA r3c<>+0(SB)/8, $0.5
DATA r3c<>+8(SB)/8, $0.86602540378443864676 // sin(2π/3)
GLOBL r3c<>(SB), RODATA|NOPTR, $16

// func r3vec(y0, y1, y2, x0, x1, x2 *complex128, n int, wt *[4][4]float64)
//
// Forward radix-3 butterflies over n (even) complex values:
// t1 = a1+a2, t = a0 - t1/2, u = -i·sin(2π/3)·(a1-a2);
// y0 = a0+t1, y1 = (t+u)·w1, y2 = (t-u)·w2. wt holds WR1, WI1, WR2, WI2.
TEXT ·r3vec(SB), NOSPLIT, $0-64
	MOVQ y0+0(FP), DI
	MOVQ y1+8(FP), SI
	MOVQ y2+16(FP), BX
	MOVQ x0+24(FP), R8
	MOVQ x1+32(FP), R9
	MOVQ x2+40(FP), R10
	MOVQ n+48(FP), CX
	MOVQ wt+56(FP), DX
	SHLQ $4, CX
	VBROADCASTSD r3c<>+0(SB), Y12
	VBROADCASTSD r3c<>+8(SB), Y13
	VMOVUPD negodd<>(SB), Y14
	VMOVUPD 0(DX), Y8
	VMOVUPD 32(DX), Y9
	VMOVUPD 64(DX), Y10
	VMOVUPD 96(DX), Y11
	XORQ AX, AX

r3loop:
	VMOVUPD (R8)(AX*1), Y0
	VMOVUPD (R9)(AX*1), Y1
	VMOVUPD (R10)(AX*1), Y2
	VADDPD Y2, Y1, Y3 // t1
	VSUBPD Y2, Y1, Y4 // d
	VADDPD Y3, Y0, Y5 // y0
	VMOVUPD Y5, (DI)(AX*1)
	VFNMADD231PD Y12, Y3, Y0 // t = a0 - t1/2
	VPERMILPD $5, Y4, Y4
	VXORPD Y14, Y4, Y4
	VMULPD Y13, Y4, Y4 // u = sin60·(di, -dr)
	VADDPD Y4, Y0, Y1 // t+u
	VSUBPD Y4, Y0, Y2 // t-u
	VPERMILPD $5, Y1, Y3
	VMULPD Y8, Y1, Y1
	VFMADD231PD Y9, Y3, Y1
	VMOVUPD Y1, (SI)(AX*1)
	VPERMILPD $5, Y2, Y3
	VMULPD Y10, Y2, Y2
	VFMADD231PD Y11, Y3, Y2
	VMOVUPD Y2, (BX)(AX*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT r3loop
	VZEROUPPER
	RET

DATA r5c<>+0(SB)/8, $0.30901699437494742410  // cos(2π/5)
DATA r5c<>+8(SB)/8, $-0.80901699437494742410 // cos(4π/5)
DATA r5c<>+16(SB)/8, $0.95105651629515357212 // sin(2π/5)
DATA r5c<>+24(SB)/8, $0.58778525229247312917 // sin(4π/5)
GLOBL r5c<>(SB), RODATA|NOPTR, $32

// func r5vec(y0, y1, y2, y3, y4, x0, x1, x2, x3, x4 *complex128, n int, wt *[8][4]float64)
//
// Forward radix-5 butterflies over n (even) complex values (see radix5):
// t1 = a1+a4, t2 = a2+a3, t3 = a1-a4, t4 = a2-a3,
// r1 = a0 + c1 t1 + c2 t2, r2 = a0 + c2 t1 + c1 t2,
// E1 = s1 t3 + s2 t4, E2 = s2 t3 - s1 t4,
// y1 = (r1 - iE1)w1, y4 = (r1 + iE1)w4, y2 = (r2 - iE2)w2, y3 = (r2 + iE2)w3.
// wt holds WR1, WI1, ..., WR4, WI4.
TEXT ·r5vec(SB), NOSPLIT, $0-96
	MOVQ x0+40(FP), R8
	MOVQ x1+48(FP), R9
	MOVQ x2+56(FP), R10
	MOVQ x3+64(FP), R11
	MOVQ x4+72(FP), R12
	MOVQ n+80(FP), CX
	MOVQ wt+88(FP), DX
	MOVQ y0+0(FP), DI
	MOVQ y1+8(FP), SI
	MOVQ y2+16(FP), BX
	MOVQ y3+24(FP), R13
	MOVQ y4+32(FP), R14
	SHLQ $4, CX
	VBROADCASTSD r5c<>+0(SB), Y10
	VBROADCASTSD r5c<>+8(SB), Y11
	VBROADCASTSD r5c<>+16(SB), Y12
	VBROADCASTSD r5c<>+24(SB), Y13
	VMOVUPD negodd<>(SB), Y14
	XORQ AX, AX

r5loop:
	VMOVUPD (R8)(AX*1), Y0
	VMOVUPD (R9)(AX*1), Y1
	VMOVUPD (R10)(AX*1), Y2
	VMOVUPD (R11)(AX*1), Y3
	VMOVUPD (R12)(AX*1), Y4
	VADDPD Y4, Y1, Y5 // t1
	VSUBPD Y4, Y1, Y6 // t3
	VADDPD Y3, Y2, Y7 // t2
	VSUBPD Y3, Y2, Y8 // t4
	VADDPD Y7, Y5, Y9
	VADDPD Y0, Y9, Y9 // y0
	VMOVUPD Y9, (DI)(AX*1)
	VMOVAPD Y0, Y1
	VFMADD231PD Y10, Y5, Y1 // r1 = a0 + c1 t1
	VFMADD231PD Y11, Y7, Y1 //      + c2 t2
	VMOVAPD Y0, Y2
	VFMADD231PD Y11, Y5, Y2 // r2 = a0 + c2 t1
	VFMADD231PD Y10, Y7, Y2 //      + c1 t2
	VMULPD Y12, Y6, Y3      // E1 = s1 t3
	VFMADD231PD Y13, Y8, Y3 //      + s2 t4
	VMULPD Y13, Y6, Y4      // E2 = s2 t3
	VFNMADD231PD Y12, Y8, Y4 //     - s1 t4
	VPERMILPD $5, Y3, Y3
	VXORPD Y14, Y3, Y3 // -i·E1
	VPERMILPD $5, Y4, Y4
	VXORPD Y14, Y4, Y4 // -i·E2
	VADDPD Y3, Y1, Y5 // b1
	VSUBPD Y3, Y1, Y6 // b4
	VADDPD Y4, Y2, Y7 // b2
	VSUBPD Y4, Y2, Y8 // b3
	VPERMILPD $5, Y5, Y9
	VMULPD 0(DX), Y5, Y5
	VFMADD231PD 32(DX), Y9, Y5
	VMOVUPD Y5, (SI)(AX*1)
	VPERMILPD $5, Y7, Y9
	VMULPD 64(DX), Y7, Y7
	VFMADD231PD 96(DX), Y9, Y7
	VMOVUPD Y7, (BX)(AX*1)
	VPERMILPD $5, Y8, Y9
	VMULPD 128(DX), Y8, Y8
	VFMADD231PD 160(DX), Y9, Y8
	VMOVUPD Y8, (R13)(AX*1)
	VPERMILPD $5, Y6, Y9
	VMULPD 192(DX), Y6, Y6
	VFMADD231PD 224(DX), Y9, Y6
	VMOVUPD Y6, (R14)(AX*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT r5loop
	VZEROUPPER
	RET

// func r4stage(dst, src *complex128, m, s int, tw *complex128, mask *[4]uint64)
//
// A whole radix-4 Stockham stage for even s >= 2: for p < m and q < s,
// with a_j = src[q + s*(p + j*m)] and w_k = tw[3p + k-1],
// dst[q + s*(4p + k)] = w_k·b_k, b = the radix-4 butterfly of a with
// t3 = mask(swap(a1 - a3)) (negodd: forward, −i·d; negeven: inverse, +i·d;
// the inverse also takes conjugate twiddles).
TEXT ·r4stage(SB), NOSPLIT, $0-48
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), R8
	MOVQ m+16(FP), R13
	MOVQ s+24(FP), CX
	MOVQ tw+32(FP), R12
	MOVQ mask+40(FP), AX
	VMOVUPD (AX), Y14
	VMOVUPD negeven<>(SB), Y15
	SHLQ $4, CX    // s*16 bytes
	MOVQ R13, R14
	IMULQ CX, R14  // m*s*16 bytes

r4sp:
	LEAQ (R8)(R14*1), R9
	LEAQ (R9)(R14*1), R10
	LEAQ (R10)(R14*1), R11
	LEAQ (DI)(CX*1), SI
	LEAQ (SI)(CX*1), BX
	LEAQ (BX)(CX*1), DX
	VBROADCASTSD 0(R12), Y8
	VBROADCASTSD 8(R12), Y9
	VXORPD Y15, Y9, Y9
	VBROADCASTSD 16(R12), Y10
	VBROADCASTSD 24(R12), Y11
	VXORPD Y15, Y11, Y11
	VBROADCASTSD 32(R12), Y12
	VBROADCASTSD 40(R12), Y13
	VXORPD Y15, Y13, Y13
	XORQ AX, AX

r4sq:
	VMOVUPD (R8)(AX*1), Y0
	VMOVUPD (R9)(AX*1), Y1
	VMOVUPD (R10)(AX*1), Y2
	VMOVUPD (R11)(AX*1), Y3
	VADDPD Y2, Y0, Y4 // t0
	VSUBPD Y2, Y0, Y5 // t1
	VADDPD Y3, Y1, Y6 // t2
	VSUBPD Y3, Y1, Y7 // d
	VPERMILPD $5, Y7, Y7
	VXORPD Y14, Y7, Y7 // t3
	VADDPD Y6, Y4, Y0
	VMOVUPD Y0, (DI)(AX*1)
	VSUBPD Y6, Y4, Y0 // b2
	VADDPD Y7, Y5, Y1 // b1
	VSUBPD Y7, Y5, Y2 // b3
	VPERMILPD $5, Y1, Y3
	VMULPD Y8, Y1, Y1
	VFMADD231PD Y9, Y3, Y1
	VMOVUPD Y1, (SI)(AX*1)
	VPERMILPD $5, Y0, Y3
	VMULPD Y10, Y0, Y0
	VFMADD231PD Y11, Y3, Y0
	VMOVUPD Y0, (BX)(AX*1)
	VPERMILPD $5, Y2, Y3
	VMULPD Y12, Y2, Y2
	VFMADD231PD Y13, Y3, Y2
	VMOVUPD Y2, (DX)(AX*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT r4sq

	ADDQ CX, R8
	LEAQ (DX)(CX*1), DI
	ADDQ $48, R12
	DECQ R13
	JNZ r4sp
	VZEROUPPER
	RET

// func scalevec(x *complex128, n int, s float64)
//
// x[i] *= s for n complex values, n even.
TEXT ·scalevec(SB), NOSPLIT, $0-24
	MOVQ x+0(FP), DI
	MOVQ n+8(FP), CX
	VBROADCASTSD s+16(FP), Y1
	SHLQ $4, CX
	XORQ AX, AX

scloop:
	VMULPD (DI)(AX*1), Y1, Y0
	VMOVUPD Y0, (DI)(AX*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT scloop
	VZEROUPPER
	RET

// Helpers for the real transforms. "Pairs" count two complex values per
// YMM register; a reversed pointer addresses the lower element of the
// pair and moves down by 32 bytes per iteration (the pair is swapped
// with VPERMPD $0x4E).

DATA half<>+0(SB)/8, $0.5
GLOBL half<>(SB), RODATA|NOPTR, $8

// func interleave(z *complex128, a, b *float64, quads int)
// z[i] = complex(a[i], b[i]) for 4*quads values.
TEXT ·interleave(SB), NOSPLIT, $0-32
	MOVQ z+0(FP), DI
	MOVQ a+8(FP), SI
	MOVQ b+16(FP), BX
	MOVQ quads+24(FP), CX

illoop:
	VMOVUPD (SI), Y0
	VMOVUPD (BX), Y1
	VUNPCKLPD Y1, Y0, Y2 // a0 b0 a2 b2
	VUNPCKHPD Y1, Y0, Y3 // a1 b1 a3 b3
	VPERM2F128 $0x20, Y3, Y2, Y4
	VPERM2F128 $0x31, Y3, Y2, Y5
	VMOVUPD Y4, 0(DI)
	VMOVUPD Y5, 32(DI)
	ADDQ $32, SI
	ADDQ $32, BX
	ADDQ $64, DI
	DECQ CX
	JNZ illoop
	VZEROUPPER
	RET

// func deinterleave(a, b *float64, z *complex128, quads int, s float64)
// a[i] = s·real(z[i]), b[i] = s·imag(z[i]) for 4*quads values.
TEXT ·deinterleave(SB), NOSPLIT, $0-40
	MOVQ a+0(FP), DI
	MOVQ b+8(FP), BX
	MOVQ z+16(FP), SI
	MOVQ quads+24(FP), CX
	VBROADCASTSD s+32(FP), Y6

dlloop:
	VMOVUPD 0(SI), Y0
	VMOVUPD 32(SI), Y1
	VUNPCKLPD Y1, Y0, Y2 // r0 r2 r1 r3
	VUNPCKHPD Y1, Y0, Y3 // i0 i2 i1 i3
	VPERMPD $0xD8, Y2, Y2
	VPERMPD $0xD8, Y3, Y3
	VMULPD Y6, Y2, Y2
	VMULPD Y6, Y3, Y3
	VMOVUPD Y2, (DI)
	VMOVUPD Y3, (BX)
	ADDQ $64, SI
	ADDQ $32, DI
	ADDQ $32, BX
	DECQ CX
	JNZ dlloop
	VZEROUPPER
	RET

// func unpackRows(c0, c1, zl, zm *complex128, pairs int)
// With zm reversed: c0 = (zl + conj zm)/2, c1 = -i(zl - conj zm)/2.
TEXT ·unpackRows(SB), NOSPLIT, $0-40
	MOVQ c0+0(FP), DI
	MOVQ c1+8(FP), SI
	MOVQ zl+16(FP), R8
	MOVQ zm+24(FP), R9
	MOVQ pairs+32(FP), CX
	VMOVUPD negodd<>(SB), Y14
	VBROADCASTSD half<>(SB), Y13

uploop:
	VMOVUPD (R8), Y0
	VPERMPD $0x4E, (R9), Y1
	VXORPD Y14, Y1, Y1 // conj zm
	VADDPD Y1, Y0, Y2
	VSUBPD Y1, Y0, Y3
	VMULPD Y13, Y2, Y2
	VPERMILPD $5, Y3, Y3
	VXORPD Y14, Y3, Y3
	VMULPD Y13, Y3, Y3
	VMOVUPD Y2, (DI)
	VMOVUPD Y3, (SI)
	ADDQ $32, R8
	SUBQ $32, R9
	ADDQ $32, DI
	ADDQ $32, SI
	DECQ CX
	JNZ uploop
	VZEROUPPER
	RET

// func hermHalf(c, s0, sm *complex128, pairs int)
// With sm reversed: c = (s0 + conj sm)/2.
TEXT ·hermHalf(SB), NOSPLIT, $0-32
	MOVQ c+0(FP), DI
	MOVQ s0+8(FP), R8
	MOVQ sm+16(FP), R9
	MOVQ pairs+24(FP), CX
	VMOVUPD negodd<>(SB), Y14
	VBROADCASTSD half<>(SB), Y13

hhloop:
	VMOVUPD (R8), Y0
	VPERMPD $0x4E, (R9), Y1
	VXORPD Y14, Y1, Y1
	VADDPD Y1, Y0, Y2
	VMULPD Y13, Y2, Y2
	VMOVUPD Y2, (DI)
	ADDQ $32, R8
	SUBQ $32, R9
	ADDQ $32, DI
	DECQ CX
	JNZ hhloop
	VZEROUPPER
	RET

// func packInv(zf, zr, g0, g1 *complex128, pairs int)
// zf = g0 + i g1 (ascending); zr (reversed) = conj(g0) + i conj(g1)
// = conj(g0 - i g1).
TEXT ·packInv(SB), NOSPLIT, $0-40
	MOVQ zf+0(FP), DI
	MOVQ zr+8(FP), SI
	MOVQ g0+16(FP), R8
	MOVQ g1+24(FP), R9
	MOVQ pairs+32(FP), CX
	VMOVUPD negodd<>(SB), Y14
	VMOVUPD negeven<>(SB), Y15

piloop:
	VMOVUPD (R8), Y0
	VMOVUPD (R9), Y1
	VPERMILPD $5, Y1, Y1
	VXORPD Y15, Y1, Y1 // i·g1
	VADDPD Y1, Y0, Y2
	VSUBPD Y1, Y0, Y3
	VXORPD Y14, Y3, Y3
	VPERMPD $0x4E, Y3, Y3
	VMOVUPD Y2, (DI)
	VMOVUPD Y3, (SI)
	ADDQ $32, R8
	ADDQ $32, R9
	ADDQ $32, DI
	SUBQ $32, SI
	DECQ CX
	JNZ piloop
	VZEROUPPER
	RET

// func conjRev(d, c *complex128, pairs int)
// d ascending = conj of c reversed.
TEXT ·conjRev(SB), NOSPLIT, $0-24
	MOVQ d+0(FP), DI
	MOVQ c+8(FP), SI
	MOVQ pairs+16(FP), CX
	VMOVUPD negodd<>(SB), Y14

crloop:
	VPERMPD $0x4E, (SI), Y0
	VXORPD Y14, Y0, Y0
	VMOVUPD Y0, (DI)
	ADDQ $32, DI
	SUBQ $32, SI
	DECQ CX
	JNZ crloop
	VZEROUPPER
	RET

DATA sqrthalf<>+0(SB)/8, $0.70710678118654752440
GLOBL sqrthalf<>(SB), RODATA|NOPTR, $8

// func r8last(dst, src *complex128, s int, mask *[4]uint64)
//
// A last radix-8 Stockham stage (m = 1, unit twiddles) for even s >= 2:
// dst[q + s*k] = Σ_j src[q + s*j]·exp(∓2πi jk/8). With J = ∓i given by
// mask (negodd: forward, negeven: inverse), the butterfly is two radix-4
// butterflies on the even and odd inputs joined by 1, (1+J)/√2, J and
// (J-1)/√2.
TEXT ·r8last(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), R8
	MOVQ s+16(FP), CX
	MOVQ mask+24(FP), AX
	VMOVUPD (AX), Y14
	VBROADCASTSD sqrthalf<>(SB), Y13
	SHLQ $4, CX // S = s*16 bytes
	MOVQ CX, R9
	LEAQ (R9)(R9*2), R10 // 3S
	LEAQ (R9)(R9*4), R11 // 5S
	LEAQ (R10)(R9*4), R12 // 7S
	XORQ AX, AX

r8loop:
	LEAQ (R8)(AX*1), SI
	LEAQ (DI)(AX*1), BX
	VMOVUPD (SI), Y0
	VMOVUPD (SI)(R9*1), Y1
	VMOVUPD (SI)(R9*2), Y2
	VMOVUPD (SI)(R10*1), Y3
	VMOVUPD (SI)(R9*4), Y4
	VMOVUPD (SI)(R11*1), Y5
	VMOVUPD (SI)(R10*2), Y6
	VMOVUPD (SI)(R12*1), Y7
	// even half
	VADDPD Y4, Y0, Y8 // e0
	VSUBPD Y4, Y0, Y0 // e1
	VADDPD Y6, Y2, Y4 // e2
	VSUBPD Y6, Y2, Y2
	VPERMILPD $5, Y2, Y2
	VXORPD Y14, Y2, Y2 // e3 = J(a2-a6)
	VADDPD Y4, Y8, Y6 // E0
	VSUBPD Y4, Y8, Y8 // E2
	VADDPD Y2, Y0, Y4 // E1
	VSUBPD Y2, Y0, Y0 // E3
	// odd half
	VADDPD Y5, Y1, Y2 // o0
	VSUBPD Y5, Y1, Y1 // o1
	VADDPD Y7, Y3, Y5 // o2
	VSUBPD Y7, Y3, Y3
	VPERMILPD $5, Y3, Y3
	VXORPD Y14, Y3, Y3 // o3
	VADDPD Y5, Y2, Y7 // O0
	VSUBPD Y5, Y2, Y2 // O2
	VADDPD Y3, Y1, Y5 // O1
	VSUBPD Y3, Y1, Y1 // O3
	// O1 = (O1 + J O1)/√2, O2 = J O2, O3 = (J O3 - O3)/√2
	VPERMILPD $5, Y5, Y3
	VXORPD Y14, Y3, Y3
	VADDPD Y3, Y5, Y5
	VMULPD Y13, Y5, Y5
	VPERMILPD $5, Y2, Y2
	VXORPD Y14, Y2, Y2
	VPERMILPD $5, Y1, Y3
	VXORPD Y14, Y3, Y3
	VSUBPD Y1, Y3, Y1
	VMULPD Y13, Y1, Y1
	// outputs
	VADDPD Y7, Y6, Y3
	VMOVUPD Y3, (BX)
	VSUBPD Y7, Y6, Y3
	VMOVUPD Y3, (BX)(R9*4)
	VADDPD Y5, Y4, Y3
	VMOVUPD Y3, (BX)(R9*1)
	VSUBPD Y5, Y4, Y3
	VMOVUPD Y3, (BX)(R11*1)
	VADDPD Y2, Y8, Y3
	VMOVUPD Y3, (BX)(R9*2)
	VSUBPD Y2, Y8, Y3
	VMOVUPD Y3, (BX)(R10*2)
	VADDPD Y1, Y0, Y3
	VMOVUPD Y3, (BX)(R10*1)
	VSUBPD Y1, Y0, Y3
	VMOVUPD Y3, (BX)(R12*1)
	ADDQ $32, AX
	CMPQ AX, CX
	JLT r8loop
	VZEROUPPER
	RET
