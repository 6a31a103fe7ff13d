//go:build amd64 && !purego

#include "textflag.h"

// TRANSPOSE8 transposes the 8x8 block of float32 rows in Y0-Y7 into
// Y8-Y15 (row k of the result is column k of the block), clobbering Y0-Y7.
#define TRANSPOSE8 \
	VUNPCKLPS Y1, Y0, Y8; \
	VUNPCKHPS Y1, Y0, Y9; \
	VUNPCKLPS Y3, Y2, Y10; \
	VUNPCKHPS Y3, Y2, Y11; \
	VUNPCKLPS Y5, Y4, Y12; \
	VUNPCKHPS Y5, Y4, Y13; \
	VUNPCKLPS Y7, Y6, Y14; \
	VUNPCKHPS Y7, Y6, Y15; \
	VSHUFPS $0x44, Y10, Y8, Y0; \
	VSHUFPS $0xEE, Y10, Y8, Y1; \
	VSHUFPS $0x44, Y11, Y9, Y2; \
	VSHUFPS $0xEE, Y11, Y9, Y3; \
	VSHUFPS $0x44, Y14, Y12, Y4; \
	VSHUFPS $0xEE, Y14, Y12, Y5; \
	VSHUFPS $0x44, Y15, Y13, Y6; \
	VSHUFPS $0xEE, Y15, Y13, Y7; \
	VPERM2F128 $0x20, Y4, Y0, Y8; \
	VPERM2F128 $0x20, Y5, Y1, Y9; \
	VPERM2F128 $0x20, Y6, Y2, Y10; \
	VPERM2F128 $0x20, Y7, Y3, Y11; \
	VPERM2F128 $0x31, Y4, Y0, Y12; \
	VPERM2F128 $0x31, Y5, Y1, Y13; \
	VPERM2F128 $0x31, Y6, Y2, Y14; \
	VPERM2F128 $0x31, Y7, Y3, Y15

// func kern6x16(k int, a, b, c *float32, ldc int, overwrite bool)
// C[0:6, 0:16] += sum over p < k of a[p*6+i] * b[p*16+j]
// (or = when overwrite is set)
TEXT ·kern6x16(SB), NOSPLIT, $0-41
	MOVQ k+0(FP), CX
	MOVQ a+8(FP), SI
	MOVQ b+16(FP), DI
	MOVQ c+24(FP), DX
	MOVQ ldc+32(FP), R8
	SHLQ $2, R8
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1
	VXORPS Y2, Y2, Y2
	VXORPS Y3, Y3, Y3
	VXORPS Y4, Y4, Y4
	VXORPS Y5, Y5, Y5
	VXORPS Y6, Y6, Y6
	VXORPS Y7, Y7, Y7
	VXORPS Y8, Y8, Y8
	VXORPS Y9, Y9, Y9
	VXORPS Y10, Y10, Y10
	VXORPS Y11, Y11, Y11

loop:
	VMOVUPS (DI), Y12
	VMOVUPS 32(DI), Y13
	VBROADCASTSS (SI), Y14
	VFMADD231PS Y12, Y14, Y0
	VFMADD231PS Y13, Y14, Y1
	VBROADCASTSS 4(SI), Y15
	VFMADD231PS Y12, Y15, Y2
	VFMADD231PS Y13, Y15, Y3
	VBROADCASTSS 8(SI), Y14
	VFMADD231PS Y12, Y14, Y4
	VFMADD231PS Y13, Y14, Y5
	VBROADCASTSS 12(SI), Y15
	VFMADD231PS Y12, Y15, Y6
	VFMADD231PS Y13, Y15, Y7
	VBROADCASTSS 16(SI), Y14
	VFMADD231PS Y12, Y14, Y8
	VFMADD231PS Y13, Y14, Y9
	VBROADCASTSS 20(SI), Y15
	VFMADD231PS Y12, Y15, Y10
	VFMADD231PS Y13, Y15, Y11
	ADDQ $24, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  loop

	MOVBLZX overwrite+40(FP), AX
	TESTL AX, AX
	JNZ  store

	VADDPS (DX), Y0, Y0
	VADDPS 32(DX), Y1, Y1
	VMOVUPS Y0, (DX)
	VMOVUPS Y1, 32(DX)
	ADDQ R8, DX
	VADDPS (DX), Y2, Y2
	VADDPS 32(DX), Y3, Y3
	VMOVUPS Y2, (DX)
	VMOVUPS Y3, 32(DX)
	ADDQ R8, DX
	VADDPS (DX), Y4, Y4
	VADDPS 32(DX), Y5, Y5
	VMOVUPS Y4, (DX)
	VMOVUPS Y5, 32(DX)
	ADDQ R8, DX
	VADDPS (DX), Y6, Y6
	VADDPS 32(DX), Y7, Y7
	VMOVUPS Y6, (DX)
	VMOVUPS Y7, 32(DX)
	ADDQ R8, DX
	VADDPS (DX), Y8, Y8
	VADDPS 32(DX), Y9, Y9
	VMOVUPS Y8, (DX)
	VMOVUPS Y9, 32(DX)
	ADDQ R8, DX
	VADDPS (DX), Y10, Y10
	VADDPS 32(DX), Y11, Y11
	VMOVUPS Y10, (DX)
	VMOVUPS Y11, 32(DX)
	VZEROUPPER
	RET

store:
	VMOVUPS Y0, (DX)
	VMOVUPS Y1, 32(DX)
	ADDQ R8, DX
	VMOVUPS Y2, (DX)
	VMOVUPS Y3, 32(DX)
	ADDQ R8, DX
	VMOVUPS Y4, (DX)
	VMOVUPS Y5, 32(DX)
	ADDQ R8, DX
	VMOVUPS Y6, (DX)
	VMOVUPS Y7, 32(DX)
	ADDQ R8, DX
	VMOVUPS Y8, (DX)
	VMOVUPS Y9, 32(DX)
	ADDQ R8, DX
	VMOVUPS Y10, (DX)
	VMOVUPS Y11, 32(DX)
	VZEROUPPER
	RET

// func copyRows16(dst, src *float32, n, lds int)
// dst[i*16 : i*16+16] = src[i*lds : i*lds+16] for i < n: the rows of an
// untransposed B panel into its packed form.
TEXT ·copyRows16(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ lds+24(FP), R8
	SHLQ $2, R8
	TESTQ CX, CX
	JEQ  done16

rows16:
	VMOVUPS (SI), Y0
	VMOVUPS 32(SI), Y1
	VMOVUPS Y0, (DI)
	VMOVUPS Y1, 32(DI)
	ADDQ R8, SI
	ADDQ $64, DI
	DECQ CX
	JNZ  rows16

done16:
	VZEROUPPER
	RET

// func copyRows6(dst, src *float32, n, lds int)
// dst[i*6 : i*6+6] = src[i*lds : i*lds+6] for i < n: a transposed A's
// panel, six consecutive values per depth step, into its packed form.
TEXT ·copyRows6(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ lds+24(FP), R8
	SHLQ $2, R8
	TESTQ CX, CX
	JEQ  done6

rows6:
	MOVUPS (SI), X0
	MOVQ   16(SI), AX
	MOVUPS X0, (DI)
	MOVQ   AX, 16(DI)
	ADDQ R8, SI
	ADDQ $24, DI
	DECQ CX
	JNZ  rows6

done6:
	RET

// func transpose16(dst, src *float32, lds, groups int)
// Packs a transposed B panel: for p < 8*groups and j < 16,
// dst[p*16+j] = src[j*lds+p], by two 8x8 transposes in registers per
// group of eight depth steps.
TEXT ·transpose16(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ lds+16(FP), R8
	MOVQ groups+24(FP), CX
	SHLQ $2, R8
	TESTQ CX, CX
	JEQ  donet
	LEAQ (SI)(R8*1), R9
	LEAQ (R9)(R8*1), R10
	LEAQ (R10)(R8*1), R11
	LEAQ (SI)(R8*4), R12
	LEAQ (R9)(R8*4), R13
	LEAQ (R10)(R8*4), BX
	LEAQ (R11)(R8*4), DX

groupt:
	VMOVUPS (SI), Y0
	VMOVUPS (R9), Y1
	VMOVUPS (R10), Y2
	VMOVUPS (R11), Y3
	VMOVUPS (R12), Y4
	VMOVUPS (R13), Y5
	VMOVUPS (BX), Y6
	VMOVUPS (DX), Y7
	TRANSPOSE8
	VMOVUPS Y8, (DI)
	VMOVUPS Y9, 64(DI)
	VMOVUPS Y10, 128(DI)
	VMOVUPS Y11, 192(DI)
	VMOVUPS Y12, 256(DI)
	VMOVUPS Y13, 320(DI)
	VMOVUPS Y14, 384(DI)
	VMOVUPS Y15, 448(DI)
	VMOVUPS (SI)(R8*8), Y0
	VMOVUPS (R9)(R8*8), Y1
	VMOVUPS (R10)(R8*8), Y2
	VMOVUPS (R11)(R8*8), Y3
	VMOVUPS (R12)(R8*8), Y4
	VMOVUPS (R13)(R8*8), Y5
	VMOVUPS (BX)(R8*8), Y6
	VMOVUPS (DX)(R8*8), Y7
	TRANSPOSE8
	VMOVUPS Y8, 32(DI)
	VMOVUPS Y9, 96(DI)
	VMOVUPS Y10, 160(DI)
	VMOVUPS Y11, 224(DI)
	VMOVUPS Y12, 288(DI)
	VMOVUPS Y13, 352(DI)
	VMOVUPS Y14, 416(DI)
	VMOVUPS Y15, 480(DI)
	ADDQ $32, SI
	ADDQ $32, R9
	ADDQ $32, R10
	ADDQ $32, R11
	ADDQ $32, R12
	ADDQ $32, R13
	ADDQ $32, BX
	ADDQ $32, DX
	ADDQ $512, DI
	DECQ CX
	JNZ  groupt

donet:
	VZEROUPPER
	RET

// func interleave6(dst, src *float32, lda, groups int)
// Packs an untransposed A panel: for p < 8*groups and i < 6,
// dst[p*6+i] = src[i*lda+p], by an 8x8 register transpose (two rows of
// zeros) per group of eight depth steps. Each of the first seven stores
// writes two values past its six, which the next store overwrites; the
// last stores exactly six, so nothing past the group is touched.
TEXT ·interleave6(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ lda+16(FP), R8
	MOVQ groups+24(FP), CX
	SHLQ $2, R8
	TESTQ CX, CX
	JEQ  donei
	LEAQ (SI)(R8*1), R9
	LEAQ (R9)(R8*1), R10
	LEAQ (R10)(R8*1), R11
	LEAQ (SI)(R8*4), R12
	LEAQ (R9)(R8*4), R13

groupi:
	VMOVUPS (SI), Y0
	VMOVUPS (R9), Y1
	VMOVUPS (R10), Y2
	VMOVUPS (R11), Y3
	VMOVUPS (R12), Y4
	VMOVUPS (R13), Y5
	VXORPS Y6, Y6, Y6
	VXORPS Y7, Y7, Y7
	TRANSPOSE8
	VMOVUPS Y8, (DI)
	VMOVUPS Y9, 24(DI)
	VMOVUPS Y10, 48(DI)
	VMOVUPS Y11, 72(DI)
	VMOVUPS Y12, 96(DI)
	VMOVUPS Y13, 120(DI)
	VMOVUPS Y14, 144(DI)
	VMOVUPS X15, 168(DI)
	VEXTRACTF128 $1, Y15, X14
	VMOVQ X14, 184(DI)
	ADDQ $32, SI
	ADDQ $32, R9
	ADDQ $32, R10
	ADDQ $32, R11
	ADDQ $32, R12
	ADDQ $32, R13
	ADDQ $192, DI
	DECQ CX
	JNZ  groupi

donei:
	VZEROUPPER
	RET
