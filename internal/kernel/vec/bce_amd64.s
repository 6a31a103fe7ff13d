//go:build amd64 && !purego

#include "textflag.h"

// func bceAVX(xp, yp, dp *float32, n int, c *[20][8]float32) float64
// For i < n (a multiple of 8): with a = min(|x|, 87.3) and e = exp(-a),
// the sum of max(x,0) - x y + log1p(e) (returned, summed in float64) and
// d = sigmoid(x) - y (stored); the same method as bceSumBlocks32, eight
// lanes at a time with fused multiply-adds.
TEXT ·bceAVX(SB), NOSPLIT, $0-48
	MOVQ xp+0(FP), SI
	MOVQ yp+8(FP), DI
	MOVQ dp+16(FP), DX
	MOVQ n+24(FP), CX
	MOVQ c+32(FP), AX
	VXORPD Y14, Y14, Y14
	VXORPD Y15, Y15, Y15
	XORQ BX, BX

loop:
	CMPQ BX, CX
	JGE  done
	VMOVUPS (SI)(BX*4), Y0      // x
	VMOVUPS (DI)(BX*4), Y1      // y
	VANDPS  0(AX), Y0, Y2       // a = |x|
	VMINPS  32(AX), Y2, Y2      // a = min(a, 87.3)
	VMULPS  64(AX), Y2, Y3      // a log2(e)
	VROUNDPS $0, Y3, Y3         // k, nearest
	VMULPS  96(AX), Y3, Y4      // k ln2hi
	VSUBPS  Y2, Y4, Y4          // k ln2hi - a
	VFMADD231PS 128(AX), Y3, Y4 // r = k ln2hi - a + k ln2lo
	VMOVUPS 160(AX), Y5         // 1/5040
	VFMADD213PS 192(AX), Y4, Y5 // r p + 1/720
	VFMADD213PS 224(AX), Y4, Y5 // + 1/120
	VFMADD213PS 256(AX), Y4, Y5 // + 1/24
	VFMADD213PS 288(AX), Y4, Y5 // + 1/6
	VFMADD213PS 320(AX), Y4, Y5 // + 1/2
	VFMADD213PS 352(AX), Y4, Y5 // + 1
	VFMADD213PS 352(AX), Y4, Y5 // + 1: exp(r)
	VCVTPS2DQ Y3, Y3            // k as int32
	VMOVDQU 384(AX), Y6         // 127
	VPSUBD  Y3, Y6, Y6          // 127 - k
	VPSLLD  $23, Y6, Y6         // 2^-k
	VMULPS  Y6, Y5, Y5          // e = exp(-a)

	VADDPS  416(AX), Y5, Y6     // 2 + e
	VDIVPS  Y6, Y5, Y6          // t = e/(2+e)
	VMULPS  Y6, Y6, Y7          // t^2
	VMOVUPS 448(AX), Y8         // 1/13
	VFMADD213PS 480(AX), Y7, Y8 // + 1/11
	VFMADD213PS 512(AX), Y7, Y8 // + 1/9
	VFMADD213PS 544(AX), Y7, Y8 // + 1/7
	VFMADD213PS 576(AX), Y7, Y8 // + 1/5
	VFMADD213PS 608(AX), Y7, Y8 // + 1/3
	VFMADD213PS 352(AX), Y7, Y8 // + 1
	VADDPS  Y6, Y6, Y6          // 2t
	VMULPS  Y8, Y6, Y8          // log1p(e) = 2 atanh(t)

	VXORPS  Y9, Y9, Y9
	VMAXPS  Y9, Y0, Y10         // max(x, 0)
	VMULPS  Y1, Y0, Y11         // x y
	VSUBPS  Y11, Y10, Y10
	VADDPS  Y8, Y10, Y10        // the eight losses
	VCVTPS2PD X10, Y12
	VADDPD  Y12, Y14, Y14
	VEXTRACTF128 $1, Y10, X11
	VCVTPS2PD X11, Y12
	VADDPD  Y12, Y15, Y15

	VADDPS  352(AX), Y5, Y6     // 1 + e
	VMOVUPS 352(AX), Y7         // 1
	VBLENDVPS Y0, Y5, Y7, Y7    // e where x < 0, else 1
	VDIVPS  Y6, Y7, Y7          // sigmoid(x)
	VSUBPS  Y1, Y7, Y7          // - y
	VMOVUPS Y7, (DX)(BX*4)
	ADDQ    $8, BX
	JMP     loop

done:
	VADDPD  Y15, Y14, Y14
	VEXTRACTF128 $1, Y14, X15
	VADDPD  X15, X14, X14
	VHADDPD X14, X14, X14
	VMOVSD  X14, ret+40(FP)
	VZEROUPPER
	RET

// func nonFiniteAVX(xp *float32, n int) bool
// Reports whether any of the n values (a multiple of 8) has an all-ones
// exponent (NaN or infinity): (bits & 0x7f800000) + 0x00800000 carries
// into the sign bit exactly then; the lanes are ORed and the sign bits
// tested at the end.
TEXT ·nonFiniteAVX(SB), NOSPLIT, $0-17
	MOVQ xp+0(FP), SI
	MOVQ n+8(FP), CX
	MOVL $0x7f800000, AX
	MOVQ AX, X8
	VPBROADCASTD X8, Y8
	MOVL $0x00800000, AX
	MOVQ AX, X9
	VPBROADCASTD X9, Y9
	VPXOR Y10, Y10, Y10
	VPXOR Y11, Y11, Y11
	XORQ BX, BX

loopnf:
	CMPQ BX, CX
	JGE  endnf
	VPAND (SI)(BX*4), Y8, Y0
	VPADDD Y9, Y0, Y0
	VPOR Y0, Y10, Y10
	ADDQ $8, BX
	JMP  loopnf

endnf:
	VMOVMSKPS Y10, AX
	TESTL AX, AX
	SETNE ret+16(FP)
	VZEROUPPER
	RET

// func addAVX(dst, src *float32, n int)
// dst[i] += src[i] for i < n (a multiple of 8).
TEXT ·addAVX(SB), NOSPLIT, $0-24
	MOVQ dst+0(FP), DI
	MOVQ src+8(FP), SI
	MOVQ n+16(FP), CX
	XORQ BX, BX

loopadd:
	CMPQ BX, CX
	JGE  endadd
	VMOVUPS (DI)(BX*4), Y0
	VADDPS  (SI)(BX*4), Y0, Y0
	VMOVUPS Y0, (DI)(BX*4)
	ADDQ $8, BX
	JMP  loopadd

endadd:
	VZEROUPPER
	RET

// func leakyAVX(dst, xp, gp *float32, n int, slope float32)
// With g nil: dst[i] = x[i] * f(x[i]); else dst[i] = g[i] * f(x[i]), where
// f is slope where the sign bit of x[i] is set and 1 elsewhere; n is a
// multiple of 8.
TEXT ·leakyAVX(SB), NOSPLIT, $0-36
	MOVQ dst+0(FP), DI
	MOVQ xp+8(FP), SI
	MOVQ gp+16(FP), DX
	MOVQ n+24(FP), CX
	VBROADCASTSS slope+32(FP), Y8
	MOVL $0x3f800000, AX
	MOVQ AX, X9
	VPBROADCASTD X9, Y9
	XORQ BX, BX
	TESTQ DX, DX
	JNE  loopgrad

loopfwd:
	CMPQ BX, CX
	JGE  endleaky
	VMOVUPS (SI)(BX*4), Y0
	VBLENDVPS Y0, Y8, Y9, Y1
	VMULPS Y1, Y0, Y0
	VMOVUPS Y0, (DI)(BX*4)
	ADDQ $8, BX
	JMP  loopfwd

loopgrad:
	CMPQ BX, CX
	JGE  endleaky
	VMOVUPS (SI)(BX*4), Y0
	VBLENDVPS Y0, Y8, Y9, Y1
	VMULPS (DX)(BX*4), Y1, Y1
	VMOVUPS Y1, (DI)(BX*4)
	ADDQ $8, BX
	JMP  loopgrad

endleaky:
	VZEROUPPER
	RET

// func tanhAVX(dst, xp *float32, n int, c *[23][8]float32)
// dst[i] = tanh(x[i]) for i < n (a multiple of 8) by the method and in the
// operation order of package engine's tanh32 (separate multiplies and
// adds, no fused multiply-add), so the results are bitwise those of the
// Go function: the Taylor series below |x| = 0.35, (1 - e)/(1 + e) with
// e = exp(-2|x|) above, the sign copied from x.
TEXT ·tanhAVX(SB), NOSPLIT, $0-32
	MOVQ dst+0(FP), DI
	MOVQ xp+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ c+24(FP), AX
	XORQ BX, BX

looptanh:
	CMPQ BX, CX
	JGE  endtanh
	VMOVUPS (SI)(BX*4), Y0          // x
	VANDPS  0(AX), Y0, Y1        // a = |x|
	// series: a * (1 + a2*(t2 + a2*(t3 + ... + a2*t7)))
	VMULPS  Y1, Y1, Y2              // a2
	VMULPS  544(AX), Y2, Y3
	VADDPS  576(AX), Y3, Y3
	VMULPS  Y2, Y3, Y3
	VADDPS  608(AX), Y3, Y3
	VMULPS  Y2, Y3, Y3
	VADDPS  640(AX), Y3, Y3
	VMULPS  Y2, Y3, Y3
	VADDPS  672(AX), Y3, Y3
	VMULPS  Y2, Y3, Y3
	VADDPS  704(AX), Y3, Y3
	VMULPS  Y2, Y3, Y3
	VADDPS  448(AX), Y3, Y3
	VMULPS  Y1, Y3, Y3              // series value
	// exp(-2a) as expNeg32
	VADDPS  Y1, Y1, Y4              // b = 2a
	VMULPS  128(AX), Y4, Y5
	VADDPS  160(AX), Y5, Y5
	VCVTTPS2DQ Y5, Y6               // int32(b log2e + 0.5)
	VCVTDQ2PS Y6, Y5                // k
	VMULPS  192(AX), Y5, Y7          // k ln2hi
	VSUBPS  Y4, Y7, Y7              // - b
	VMULPS  224(AX), Y5, Y8          // k ln2lo
	VADDPS  Y8, Y7, Y7              // r
	VMULPS  256(AX), Y7, Y8
	VADDPS  288(AX), Y8, Y8
	VMULPS  Y7, Y8, Y8
	VADDPS  320(AX), Y8, Y8
	VMULPS  Y7, Y8, Y8
	VADDPS  352(AX), Y8, Y8
	VMULPS  Y7, Y8, Y8
	VADDPS  384(AX), Y8, Y8
	VMULPS  Y7, Y8, Y8
	VADDPS  416(AX), Y8, Y8
	VMULPS  Y7, Y8, Y8
	VADDPS  448(AX), Y8, Y8
	VMULPS  Y7, Y8, Y8
	VADDPS  448(AX), Y8, Y8            // exp(r)
	VMOVDQU 480(AX), Y9
	VPSUBD  Y6, Y9, Y9
	VPSLLD  $23, Y9, Y9             // 2^-k
	VMULPS  Y9, Y8, Y8              // e
	VCMPPS  $2, 96(AX), Y4, Y10     // b <= 87.3
	VANDPS  Y10, Y8, Y8             // else e = 0
	VMOVUPS 448(AX), Y11
	VSUBPS  Y8, Y11, Y12            // 1 - e
	VADDPS  Y8, Y11, Y13            // 1 + e
	VDIVPS  Y13, Y12, Y12           // (1 - e)/(1 + e)
	VCMPPS  $1, 64(AX), Y1, Y14     // a < 0.35
	VBLENDVPS Y14, Y3, Y12, Y12     // series where a < 0.35
	VANDPS  32(AX), Y0, Y15
	VORPS   Y15, Y12, Y12           // sign of x
	VMOVUPS Y12, (DI)(BX*4)
	ADDQ    $8, BX
	JMP     looptanh

endtanh:
	VZEROUPPER
	RET
