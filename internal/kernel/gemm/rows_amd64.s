//go:build amd64 && !purego

#include "textflag.h"

// func row16(k int, a, b *float32, ldb int, c *float32, overwrite bool)
// c[0:16] += sum over p < k of a[p] * b[p*ldb+j] (or = when overwrite is
// set): one accumulator per element from +0, one fused multiply-add per
// step in order of p, then one addition into c, as in kern6x16.
TEXT ·row16(SB), NOSPLIT, $0-41
	MOVQ k+0(FP), CX
	MOVQ a+8(FP), SI
	MOVQ b+16(FP), DI
	MOVQ ldb+24(FP), R8
	SHLQ $2, R8
	MOVQ c+32(FP), DX
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1

loop16:
	VBROADCASTSS (SI), Y2
	VFMADD231PS  (DI), Y2, Y0
	VFMADD231PS  32(DI), Y2, Y1
	ADDQ $4, SI
	ADDQ R8, DI
	DECQ CX
	JNZ  loop16

	MOVBLZX overwrite+40(FP), AX
	TESTL AX, AX
	JNZ   store16
	VADDPS (DX), Y0, Y0
	VADDPS 32(DX), Y1, Y1

store16:
	VMOVUPS Y0, (DX)
	VMOVUPS Y1, 32(DX)
	VZEROUPPER
	RET

// func row64(k int, a, b *float32, ldb int, c *float32, overwrite bool)
// row16 for 64 columns: eight independent chains instead of two.
TEXT ·row64(SB), NOSPLIT, $0-41
	MOVQ k+0(FP), CX
	MOVQ a+8(FP), SI
	MOVQ b+16(FP), DI
	MOVQ ldb+24(FP), R8
	SHLQ $2, R8
	MOVQ c+32(FP), DX
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1
	VXORPS Y2, Y2, Y2
	VXORPS Y3, Y3, Y3
	VXORPS Y4, Y4, Y4
	VXORPS Y5, Y5, Y5
	VXORPS Y6, Y6, Y6
	VXORPS Y7, Y7, Y7

loop64:
	VBROADCASTSS (SI), Y8
	VFMADD231PS  (DI), Y8, Y0
	VFMADD231PS  32(DI), Y8, Y1
	VFMADD231PS  64(DI), Y8, Y2
	VFMADD231PS  96(DI), Y8, Y3
	VFMADD231PS  128(DI), Y8, Y4
	VFMADD231PS  160(DI), Y8, Y5
	VFMADD231PS  192(DI), Y8, Y6
	VFMADD231PS  224(DI), Y8, Y7
	ADDQ $4, SI
	ADDQ R8, DI
	DECQ CX
	JNZ  loop64

	MOVBLZX overwrite+40(FP), AX
	TESTL AX, AX
	JNZ   store64
	VADDPS (DX), Y0, Y0
	VADDPS 32(DX), Y1, Y1
	VADDPS 64(DX), Y2, Y2
	VADDPS 96(DX), Y3, Y3
	VADDPS 128(DX), Y4, Y4
	VADDPS 160(DX), Y5, Y5
	VADDPS 192(DX), Y6, Y6
	VADDPS 224(DX), Y7, Y7

store64:
	VMOVUPS Y0, (DX)
	VMOVUPS Y1, 32(DX)
	VMOVUPS Y2, 64(DX)
	VMOVUPS Y3, 96(DX)
	VMOVUPS Y4, 128(DX)
	VMOVUPS Y5, 160(DX)
	VMOVUPS Y6, 192(DX)
	VMOVUPS Y7, 224(DX)
	VZEROUPPER
	RET

// func row16m(k int, a, b *float32, ldb int, c *float32, overwrite bool, mask *int32)
// row16 for the first w < 16 columns: mask points at 16 lanes, -1 for the
// columns to compute and 0 for the rest, which are neither read nor
// written (masked loads give them zeros).
TEXT ·row16m(SB), NOSPLIT, $0-56
	MOVQ k+0(FP), CX
	MOVQ a+8(FP), SI
	MOVQ b+16(FP), DI
	MOVQ ldb+24(FP), R8
	SHLQ $2, R8
	MOVQ c+32(FP), DX
	MOVQ mask+48(FP), AX
	VMOVDQU (AX), Y3
	VMOVDQU 32(AX), Y4
	VXORPS Y0, Y0, Y0
	VXORPS Y1, Y1, Y1

loop16m:
	VBROADCASTSS (SI), Y2
	VMASKMOVPS   (DI), Y3, Y5
	VFMADD231PS  Y5, Y2, Y0
	VMASKMOVPS   32(DI), Y4, Y6
	VFMADD231PS  Y6, Y2, Y1
	ADDQ $4, SI
	ADDQ R8, DI
	DECQ CX
	JNZ  loop16m

	MOVBLZX overwrite+40(FP), BX
	TESTL BX, BX
	JNZ   store16m
	VMASKMOVPS (DX), Y3, Y5
	VADDPS     Y5, Y0, Y0
	VMASKMOVPS 32(DX), Y4, Y6
	VADDPS     Y6, Y1, Y1

store16m:
	VMASKMOVPS Y0, Y3, (DX)
	VMASKMOVPS Y1, Y4, 32(DX)
	VZEROUPPER
	RET
