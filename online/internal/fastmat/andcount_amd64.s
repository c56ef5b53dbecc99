#include "textflag.h"

// Population counts of the nibbles 0…15, in both 128-bit lanes.
DATA nibbleCount<>+0(SB)/8, $0x0302020102010100
DATA nibbleCount<>+8(SB)/8, $0x0403030203020201
DATA nibbleCount<>+16(SB)/8, $0x0302020102010100
DATA nibbleCount<>+24(SB)/8, $0x0403030203020201
GLOBL nibbleCount<>(SB), RODATA|NOPTR, $32

// func andCount8(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int)
// dst[i] += Σ_{m<planes} 2^m Σ_{w<nw} popcount(x[w·stride+i] & masks[m·nw+w])
// for i < n, n a positive multiple of 8, nw and planes positive; the planes
// by Horner's scheme from the highest down. AVX-512 F and VPOPCNTDQ.
TEXT ·andCount8(SB), NOSPLIT, $0-56
	MOVQ n+0(FP), DX
	MOVQ dst+8(FP), DI
	MOVQ x+16(FP), SI
	MOVQ stride+24(FP), R8
	SHLQ $3, R8
	MOVQ nw+40(FP), R10
	MOVQ planes+48(FP), R14
	MOVQ R10, BX
	SHLQ $4, BX             // two planes of masks, in bytes
	MOVQ R14, AX
	DECQ AX
	IMULQ R10, AX
	SHLQ $3, AX
	MOVQ masks+32(FP), R9
	ADDQ AX, R9             // the highest plane's masks

strings8:
	VPXORQ Z0, Z0, Z0
	MOVQ R9, R12
	MOVQ R14, R15

planes8:
	VPADDQ Z0, Z0, Z0
	MOVQ SI, R11
	MOVQ R10, R13

words8:
	VMOVDQU64 (R11), Z1
	VPANDQ.BCST (R12), Z1, Z1
	VPOPCNTQ Z1, Z1
	VPADDQ Z1, Z0, Z0
	ADDQ R8, R11
	ADDQ $8, R12
	DECQ R13
	JNZ  words8

	SUBQ BX, R12
	DECQ R15
	JNZ  planes8

	VPMOVQD Z0, Y1
	VPADDD (DI), Y1, Y1
	VMOVDQU Y1, (DI)
	ADDQ $64, SI
	ADDQ $32, DI
	SUBQ $8, DX
	JNZ  strings8
	VZEROUPPER
	RET

// func andCount16(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int)
// andCount8 for n a positive multiple of 16, sixteen strings at a time in
// two independent sets of eight. AVX-512 F and VPOPCNTDQ.
TEXT ·andCount16(SB), NOSPLIT, $0-56
	MOVQ n+0(FP), DX
	MOVQ dst+8(FP), DI
	MOVQ x+16(FP), SI
	MOVQ stride+24(FP), R8
	SHLQ $3, R8
	MOVQ nw+40(FP), R10
	MOVQ planes+48(FP), R14
	MOVQ R10, BX
	SHLQ $4, BX
	MOVQ R14, AX
	DECQ AX
	IMULQ R10, AX
	SHLQ $3, AX
	MOVQ masks+32(FP), R9
	ADDQ AX, R9

strings16:
	VPXORQ Z0, Z0, Z0
	VPXORQ Z2, Z2, Z2
	MOVQ R9, R12
	MOVQ R14, R15

planes16:
	VPADDQ Z0, Z0, Z0
	VPADDQ Z2, Z2, Z2
	MOVQ SI, R11
	MOVQ R10, R13

words16:
	VPBROADCASTQ (R12), Z4
	VPANDQ (R11), Z4, Z1
	VPANDQ 64(R11), Z4, Z3
	VPOPCNTQ Z1, Z1
	VPOPCNTQ Z3, Z3
	VPADDQ Z1, Z0, Z0
	VPADDQ Z3, Z2, Z2
	ADDQ R8, R11
	ADDQ $8, R12
	DECQ R13
	JNZ  words16

	SUBQ BX, R12
	DECQ R15
	JNZ  planes16

	VPMOVQD Z0, Y1
	VPMOVQD Z2, Y3
	VPADDD (DI), Y1, Y1
	VPADDD 32(DI), Y3, Y3
	VMOVDQU Y1, (DI)
	VMOVDQU Y3, 32(DI)
	ADDQ $128, SI
	ADDQ $64, DI
	SUBQ $16, DX
	JNZ  strings16
	VZEROUPPER
	RET

// func andCount4(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int)
// The same for n a positive multiple of 8 and nw in 1…31 (a byte sums
// 8·nw bits of a plane), eight strings at a time in two halves of four:
// nibbles counted by table look-up (VPSHUFB), bytes summed by VPSADBW.
// AVX2.
TEXT ·andCount4(SB), NOSPLIT, $0-56
	MOVQ n+0(FP), DX
	MOVQ dst+8(FP), DI
	MOVQ x+16(FP), SI
	MOVQ stride+24(FP), R8
	SHLQ $3, R8
	MOVQ nw+40(FP), R10
	MOVQ planes+48(FP), R14
	MOVQ R10, BX
	SHLQ $4, BX
	MOVQ R14, AX
	DECQ AX
	IMULQ R10, AX
	SHLQ $3, AX
	MOVQ masks+32(FP), R9
	ADDQ AX, R9
	VMOVDQU nibbleCount<>(SB), Y14
	MOVL $0x0f0f0f0f, AX
	MOVD AX, X15
	VPBROADCASTD X15, Y15
	VPXOR Y12, Y12, Y12

strings4:
	VPXOR Y0, Y0, Y0
	VPXOR Y5, Y5, Y5
	MOVQ R9, R12
	MOVQ R14, R15

planes4:
	VPADDQ Y0, Y0, Y0
	VPADDQ Y5, Y5, Y5
	VPXOR Y4, Y4, Y4
	VPXOR Y6, Y6, Y6
	MOVQ SI, R11
	MOVQ R10, R13

words4:
	VPBROADCASTQ (R12), Y2
	VPAND (R11), Y2, Y1
	VPAND 32(R11), Y2, Y7
	VPAND Y15, Y1, Y3
	VPAND Y15, Y7, Y8
	VPSRLW $4, Y1, Y1
	VPSRLW $4, Y7, Y7
	VPAND Y15, Y1, Y1
	VPAND Y15, Y7, Y7
	VPSHUFB Y3, Y14, Y3
	VPSHUFB Y8, Y14, Y8
	VPSHUFB Y1, Y14, Y1
	VPSHUFB Y7, Y14, Y7
	VPADDB Y3, Y4, Y4
	VPADDB Y8, Y6, Y6
	VPADDB Y1, Y4, Y4
	VPADDB Y7, Y6, Y6
	ADDQ R8, R11
	ADDQ $8, R12
	DECQ R13
	JNZ  words4

	VPSADBW Y12, Y4, Y4
	VPSADBW Y12, Y6, Y6
	VPADDQ Y4, Y0, Y0
	VPADDQ Y6, Y5, Y5
	SUBQ BX, R12
	DECQ R15
	JNZ  planes4

	VPSHUFD $0x08, Y0, Y0
	VPERMQ $0x08, Y0, Y0
	VPSHUFD $0x08, Y5, Y5
	VPERMQ $0x08, Y5, Y5
	VINSERTI128 $1, X5, Y0, Y0
	VPADDD (DI), Y0, Y0
	VMOVDQU Y0, (DI)
	ADDQ $64, SI
	ADDQ $32, DI
	SUBQ $8, DX
	JNZ  strings4
	VZEROUPPER
	RET
