//go:build amd64 && !purego

#include "textflag.h"

// func sqErrAVX(pp, tp *float32, n int, acc *[4]float64)
// For i < n (a multiple of 4): d = float64(p[i]) - float64(t[i]), and
// acc[i%4] += d*d, a product then a sum (not fused), in order of i: the
// arithmetic of a Go loop with four float64 accumulators.
TEXT ·sqErrAVX(SB), NOSPLIT, $0-32
	MOVQ pp+0(FP), SI
	MOVQ tp+8(FP), DI
	MOVQ n+16(FP), CX
	MOVQ acc+24(FP), DX
	VMOVUPD (DX), Y3
	XORQ BX, BX

loopsq:
	CMPQ BX, CX
	JGE  endsq
	VCVTPS2PD (SI)(BX*4), Y0
	VCVTPS2PD (DI)(BX*4), Y1
	VSUBPD    Y1, Y0, Y0
	VMULPD    Y0, Y0, Y0
	VADDPD    Y0, Y3, Y3
	ADDQ $4, BX
	JMP  loopsq

endsq:
	VMOVUPD Y3, (DX)
	VZEROUPPER
	RET

// func scaledDiffAVX(dst, pp, tp *float32, n int, k float32)
// dst[i] = k * (p[i] - t[i]) for i < n (a multiple of 8): a difference
// then a product, as the Go loop.
TEXT ·scaledDiffAVX(SB), NOSPLIT, $0-36
	MOVQ dst+0(FP), DX
	MOVQ pp+8(FP), SI
	MOVQ tp+16(FP), DI
	MOVQ n+24(FP), CX
	VBROADCASTSS k+32(FP), Y2
	XORQ BX, BX

loopsd:
	CMPQ BX, CX
	JGE  endsd
	VMOVUPS (SI)(BX*4), Y0
	VSUBPS  (DI)(BX*4), Y0, Y0
	VMULPS  Y2, Y0, Y0
	VMOVUPS Y0, (DX)(BX*4)
	ADDQ $8, BX
	JMP  loopsd

endsd:
	VZEROUPPER
	RET
