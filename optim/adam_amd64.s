//go:build amd64 && !purego

#include "textflag.h"

// func adamAVX(wp, gp, mp, vp *float32, n int, c *[8]float32)
// for each i: w *= decay; m = b1*m + c1*g; v = b2*v + (c2*g)*g;
// w = w - (step*m) / (sqrt(v)*inv + eps), eight lanes at a time.
TEXT ·adamAVX(SB), NOSPLIT, $0-48
	MOVQ wp+0(FP), DI
	MOVQ gp+8(FP), SI
	MOVQ mp+16(FP), R8
	MOVQ vp+24(FP), R9
	MOVQ n+32(FP), CX
	MOVQ c+40(FP), AX
	VBROADCASTSS 0(AX), Y8   // b1
	VBROADCASTSS 4(AX), Y9   // 1-b1
	VBROADCASTSS 8(AX), Y10  // b2
	VBROADCASTSS 12(AX), Y11 // 1-b2
	VBROADCASTSS 16(AX), Y12 // step
	VBROADCASTSS 20(AX), Y13 // inv
	VBROADCASTSS 24(AX), Y14 // eps
	VBROADCASTSS 28(AX), Y15 // decay
	XORQ BX, BX

loop:
	CMPQ BX, CX
	JGE done
	VMOVUPS (SI)(BX*4), Y0 // g
	VMOVUPS (DI)(BX*4), Y1 // w
	VMOVUPS (R8)(BX*4), Y2 // m
	VMOVUPS (R9)(BX*4), Y3 // v
	VMULPS Y15, Y1, Y1     // w *= decay
	VMULPS Y8, Y2, Y2      // b1*m
	VMULPS Y9, Y0, Y4      // c1*g
	VADDPS Y4, Y2, Y2      // m
	VMULPS Y11, Y0, Y5     // c2*g
	VMULPS Y0, Y5, Y5      // (c2*g)*g
	VMULPS Y10, Y3, Y3     // b2*v
	VADDPS Y5, Y3, Y3      // v
	VMOVUPS Y2, (R8)(BX*4)
	VMOVUPS Y3, (R9)(BX*4)
	VSQRTPS Y3, Y6
	VMULPS Y13, Y6, Y6     // sqrt(v)*inv
	VADDPS Y14, Y6, Y6     // + eps
	VMULPS Y12, Y2, Y7     // step*m
	VDIVPS Y6, Y7, Y7      // (step*m)/denominator
	VSUBPS Y7, Y1, Y1      // w - ...
	VMOVUPS Y1, (DI)(BX*4)
	ADDQ $8, BX
	JMP loop

done:
	VZEROUPPER
	RET
