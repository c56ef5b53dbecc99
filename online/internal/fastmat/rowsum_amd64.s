#include "textflag.h"

// The sums of AddLaggedRows, one block of values at every lag: the block's
// sums of a lag stay in registers while the rows of every start are added
// from memory, one 16-bit lane per value; the next lag's sums lie n values
// further on and its rows n values earlier.

// func laggedRows256(dst, rows *uint16, starts *int32, nk, shift, lags, n int)
TEXT ·laggedRows256(SB), NOSPLIT, $0-56
	MOVQ dst+0(FP), DI
	MOVQ rows+8(FP), SI
	MOVQ shift+32(FP), DX
	LEAQ (SI)(DX*2), SI
	MOVQ lags+40(FP), R8
	MOVQ n+48(FP), R9
	SHLQ $1, R9             // a lag's values, in bytes

laggedRows256lag:
	MOVQ starts+16(FP), BX
	MOVQ nk+24(FP), CX
	VMOVDQU 0(DI), Y0
	VMOVDQU 32(DI), Y1
	VMOVDQU 64(DI), Y2
	VMOVDQU 96(DI), Y3
	VMOVDQU 128(DI), Y4
	VMOVDQU 160(DI), Y5
	VMOVDQU 192(DI), Y6
	VMOVDQU 224(DI), Y7
	VMOVDQU 256(DI), Y8
	VMOVDQU 288(DI), Y9
	VMOVDQU 320(DI), Y10
	VMOVDQU 352(DI), Y11
	VMOVDQU 384(DI), Y12
	VMOVDQU 416(DI), Y13
	VMOVDQU 448(DI), Y14
	VMOVDQU 480(DI), Y15

laggedRows256start:
	MOVLQSX (BX), AX
	LEAQ (SI)(AX*2), AX
	VPADDW 0(AX), Y0, Y0
	VPADDW 32(AX), Y1, Y1
	VPADDW 64(AX), Y2, Y2
	VPADDW 96(AX), Y3, Y3
	VPADDW 128(AX), Y4, Y4
	VPADDW 160(AX), Y5, Y5
	VPADDW 192(AX), Y6, Y6
	VPADDW 224(AX), Y7, Y7
	VPADDW 256(AX), Y8, Y8
	VPADDW 288(AX), Y9, Y9
	VPADDW 320(AX), Y10, Y10
	VPADDW 352(AX), Y11, Y11
	VPADDW 384(AX), Y12, Y12
	VPADDW 416(AX), Y13, Y13
	VPADDW 448(AX), Y14, Y14
	VPADDW 480(AX), Y15, Y15
	ADDQ $4, BX
	DECQ CX
	JNZ  laggedRows256start

	VMOVDQU Y0, 0(DI)
	VMOVDQU Y1, 32(DI)
	VMOVDQU Y2, 64(DI)
	VMOVDQU Y3, 96(DI)
	VMOVDQU Y4, 128(DI)
	VMOVDQU Y5, 160(DI)
	VMOVDQU Y6, 192(DI)
	VMOVDQU Y7, 224(DI)
	VMOVDQU Y8, 256(DI)
	VMOVDQU Y9, 288(DI)
	VMOVDQU Y10, 320(DI)
	VMOVDQU Y11, 352(DI)
	VMOVDQU Y12, 384(DI)
	VMOVDQU Y13, 416(DI)
	VMOVDQU Y14, 448(DI)
	VMOVDQU Y15, 480(DI)
	ADDQ R9, DI             // the next lag's sums
	SUBQ R9, SI             // its rows, one row earlier
	DECQ R8
	JNZ  laggedRows256lag

	VZEROUPPER
	RET

// func laggedRows64(dst, rows *uint16, starts *int32, nk, shift, lags, n int)
TEXT ·laggedRows64(SB), NOSPLIT, $0-56
	MOVQ dst+0(FP), DI
	MOVQ rows+8(FP), SI
	MOVQ shift+32(FP), DX
	LEAQ (SI)(DX*2), SI
	MOVQ lags+40(FP), R8
	MOVQ n+48(FP), R9
	SHLQ $1, R9             // a lag's values, in bytes

laggedRows64lag:
	MOVQ starts+16(FP), BX
	MOVQ nk+24(FP), CX
	VMOVDQU 0(DI), Y0
	VMOVDQU 32(DI), Y1
	VMOVDQU 64(DI), Y2
	VMOVDQU 96(DI), Y3

laggedRows64start:
	MOVLQSX (BX), AX
	LEAQ (SI)(AX*2), AX
	VPADDW 0(AX), Y0, Y0
	VPADDW 32(AX), Y1, Y1
	VPADDW 64(AX), Y2, Y2
	VPADDW 96(AX), Y3, Y3
	ADDQ $4, BX
	DECQ CX
	JNZ  laggedRows64start

	VMOVDQU Y0, 0(DI)
	VMOVDQU Y1, 32(DI)
	VMOVDQU Y2, 64(DI)
	VMOVDQU Y3, 96(DI)
	ADDQ R9, DI             // the next lag's sums
	SUBQ R9, SI             // its rows, one row earlier
	DECQ R8
	JNZ  laggedRows64lag

	VZEROUPPER
	RET

// func laggedRows16(dst, rows *uint16, starts *int32, nk, shift, lags, n int)
TEXT ·laggedRows16(SB), NOSPLIT, $0-56
	MOVQ dst+0(FP), DI
	MOVQ rows+8(FP), SI
	MOVQ shift+32(FP), DX
	LEAQ (SI)(DX*2), SI
	MOVQ lags+40(FP), R8
	MOVQ n+48(FP), R9
	SHLQ $1, R9             // a lag's values, in bytes

laggedRows16lag:
	MOVQ starts+16(FP), BX
	MOVQ nk+24(FP), CX
	VMOVDQU 0(DI), Y0

laggedRows16start:
	MOVLQSX (BX), AX
	LEAQ (SI)(AX*2), AX
	VPADDW 0(AX), Y0, Y0
	ADDQ $4, BX
	DECQ CX
	JNZ  laggedRows16start

	VMOVDQU Y0, 0(DI)
	ADDQ R9, DI             // the next lag's sums
	SUBQ R9, SI             // its rows, one row earlier
	DECQ R8
	JNZ  laggedRows16lag

	VZEROUPPER
	RET

// laggedRows256z is laggedRows256 in eight AVX-512 registers.
// func laggedRows256z(dst, rows *uint16, starts *int32, nk, shift, lags, n int)
TEXT ·laggedRows256z(SB), NOSPLIT, $0-56
	MOVQ dst+0(FP), DI
	MOVQ rows+8(FP), SI
	MOVQ shift+32(FP), DX
	LEAQ (SI)(DX*2), SI
	MOVQ lags+40(FP), R8
	MOVQ n+48(FP), R9
	SHLQ $1, R9

laggedRows256zlag:
	MOVQ starts+16(FP), BX
	MOVQ nk+24(FP), CX
	VMOVDQU16 0(DI), Z0
	VMOVDQU16 64(DI), Z1
	VMOVDQU16 128(DI), Z2
	VMOVDQU16 192(DI), Z3
	VMOVDQU16 256(DI), Z4
	VMOVDQU16 320(DI), Z5
	VMOVDQU16 384(DI), Z6
	VMOVDQU16 448(DI), Z7

laggedRows256zstart:
	MOVLQSX (BX), AX
	LEAQ (SI)(AX*2), AX
	VPADDW 0(AX), Z0, Z0
	VPADDW 64(AX), Z1, Z1
	VPADDW 128(AX), Z2, Z2
	VPADDW 192(AX), Z3, Z3
	VPADDW 256(AX), Z4, Z4
	VPADDW 320(AX), Z5, Z5
	VPADDW 384(AX), Z6, Z6
	VPADDW 448(AX), Z7, Z7
	ADDQ $4, BX
	DECQ CX
	JNZ  laggedRows256zstart

	VMOVDQU16 Z0, 0(DI)
	VMOVDQU16 Z1, 64(DI)
	VMOVDQU16 Z2, 128(DI)
	VMOVDQU16 Z3, 192(DI)
	VMOVDQU16 Z4, 256(DI)
	VMOVDQU16 Z5, 320(DI)
	VMOVDQU16 Z6, 384(DI)
	VMOVDQU16 Z7, 448(DI)
	ADDQ R9, DI
	SUBQ R9, SI
	DECQ R8
	JNZ  laggedRows256zlag

	VZEROUPPER
	RET
