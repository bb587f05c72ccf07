//go:build amd64 && !purego

#include "textflag.h"

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

// func xgetbv() (eax, edx uint32)
TEXT ·xgetbv(SB), NOSPLIT, $0-8
	MOVL $0, CX
	XGETBV
	MOVL AX, eax+0(FP)
	MOVL DX, edx+4(FP)
	RET

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
