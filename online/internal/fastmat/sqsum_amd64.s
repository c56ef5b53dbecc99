#include "textflag.h"

// func sqSum16(n int, c float64, p, e, sq *float64) float64
// v = p[j] + c·e[j] (fused), sq[j] += v², and Σ v² in four registers of four
// partial sums (value j in register (j/4) mod 4, lane j mod 4), for j < n,
// n a positive multiple of 16; AVX2 and FMA.
TEXT ·sqSum16(SB), NOSPLIT, $0-48
	MOVQ n+0(FP), CX
	VBROADCASTSD c+8(FP), Y15
	MOVQ p+16(FP), SI
	MOVQ e+24(FP), DX
	MOVQ sq+32(FP), DI
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
	VXORPD Y2, Y2, Y2
	VXORPD Y3, Y3, Y3

loop:
	VMOVUPD 0(SI), Y4
	VMOVUPD 32(SI), Y5
	VMOVUPD 64(SI), Y6
	VMOVUPD 96(SI), Y7
	VFMADD231PD 0(DX), Y15, Y4
	VFMADD231PD 32(DX), Y15, Y5
	VFMADD231PD 64(DX), Y15, Y6
	VFMADD231PD 96(DX), Y15, Y7
	VMOVUPD 0(DI), Y8
	VMOVUPD 32(DI), Y9
	VMOVUPD 64(DI), Y10
	VMOVUPD 96(DI), Y11
	VFMADD231PD Y4, Y4, Y8
	VFMADD231PD Y5, Y5, Y9
	VFMADD231PD Y6, Y6, Y10
	VFMADD231PD Y7, Y7, Y11
	VFMADD231PD Y4, Y4, Y0
	VFMADD231PD Y5, Y5, Y1
	VFMADD231PD Y6, Y6, Y2
	VFMADD231PD Y7, Y7, Y3
	VMOVUPD Y8, 0(DI)
	VMOVUPD Y9, 32(DI)
	VMOVUPD Y10, 64(DI)
	VMOVUPD Y11, 96(DI)
	ADDQ $128, SI
	ADDQ $128, DX
	ADDQ $128, DI
	SUBQ $16, CX
	JNZ  loop

	// (Y0+Y1) + (Y2+Y3), high half onto low half, then the two lanes.
	VADDPD Y1, Y0, Y0
	VADDPD Y3, Y2, Y2
	VADDPD Y2, Y0, Y0
	VEXTRACTF128 $1, Y0, X1
	VADDPD X1, X0, X0
	VUNPCKHPD X0, X0, X1
	VADDSD X1, X0, X0
	VMOVSD X0, ret+40(FP)
	VZEROUPPER
	RET
