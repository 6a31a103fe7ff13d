//go:build amd64 && !purego

package vec

import (
	"math"

	"golang.org/x/sys/cpu"
)

//go:noescape
func bceAVX(xp, yp, dp *float32, n int, c *[20][8]float32) float64

// Enabled reports whether the vector kernels run (AVX2 and FMA present);
// tests turn it off to compare with the Go loops.
var Enabled = cpu.X86.HasAVX2 && cpu.X86.HasFMA

// bceTable holds bceAVX's constants, each repeated in eight lanes.
var bceTable = func() (t [20][8]float32) {
	vals := [20]float32{
		math.Float32frombits(0x7fffffff), 87.3, 1.44269504088896341, 0.693359375, -2.12194440e-4,
		1.0 / 5040, 1.0 / 720, 1.0 / 120, 1.0 / 24, 1.0 / 6, 1.0 / 2, 1,
		math.Float32frombits(127), 2,
		1.0 / 13, 1.0 / 11, 1.0 / 9, 1.0 / 7, 1.0 / 5, 1.0 / 3,
	}
	for i, v := range vals {
		for j := range t[i] {
			t[i][j] = v
		}
	}
	return
}()

// BCE computes, for the largest multiple of 8 elements of x (logits) and
// y (targets), the binary cross-entropy on logits max(x,0) - x y +
// log1p(exp(-|x|)) summed in float64, and d = sigmoid(x) - y; it returns
// the sum and the count handled (0 when the vector kernel is not
// enabled). The caller finishes the rest.
func BCE(d, x, y []float32) (float64, int) {
	n := len(x) &^ 7
	if !Enabled || n == 0 {
		return 0, 0
	}
	_, _ = y[n-1], d[n-1]
	return bceAVX(&x[0], &y[0], &d[0], n, &bceTable), n
}

//go:noescape
func nonFiniteAVX(xp *float32, n int) bool

// NonFinite reports whether the largest multiple of 8 values at the start
// of g holds a NaN or an infinity, and how many values it looked at (0
// when the vector kernel is not enabled). The caller checks the rest.
func NonFinite(g []float32) (bool, int) {
	n := len(g) &^ 7
	if !Enabled || n == 0 {
		return false, 0
	}
	return nonFiniteAVX(&g[0], n), n
}

//go:noescape
func addAVX(dst, src *float32, n int)

// Add adds src into dst for the largest multiple of 8 values of dst
// (src at least as long) and returns how many it added.
func Add(dst, src []float32) int {
	n := len(dst) &^ 7
	if !Enabled || n == 0 {
		return 0
	}
	_ = src[n-1]
	addAVX(&dst[0], &src[0], n)
	return n
}

//go:noescape
func leakyAVX(dst, xp, gp *float32, n int, slope float32)

// Leaky writes x (or slope*x where x's sign bit is set) into dst, or,
// with g not nil, g (or slope*g there), for the largest multiple of 8
// values of x, and returns how many it wrote.
func Leaky(dst, x, g []float32, slope float32) int {
	n := len(x) &^ 7
	if !Enabled || n == 0 {
		return 0
	}
	_ = dst[n-1]
	if g == nil {
		leakyAVX(&dst[0], &x[0], nil, n, slope)
		return n
	}
	_ = g[n-1]
	leakyAVX(&dst[0], &x[0], &g[0], n, slope)
	return n
}

//go:noescape
func tanhAVX(dst, xp *float32, n int, c *[23][8]float32)

// tanhTable holds tanhAVX's constants, each in eight lanes, as float32
// values rounded from the same expressions as in Tanh32.
var tanhTable = func() (t [23][8]float32) {
	vals := [23]float32{
		math.Float32frombits(0x7fffffff), // absmask
		math.Float32frombits(0x80000000), // signmask
		0.35,                             // c035
		87.3,                             // c873
		1.44269504088896341,              // log2e
		0.5,                              // half
		0.693359375,                      // ln2hi
		-2.12194440e-4,                   // ln2lo
		1.0 / 5040,                       // e7
		1.0 / 720,                        // e6
		1.0 / 120,                        // e5
		1.0 / 24,                         // e4
		1.0 / 6,                          // e3
		1.0 / 2,                          // e2
		1,                                // one
		math.Float32frombits(127),        // i127
		2,                                // two
		21844.0 / 6081075,                // t7
		-1382.0 / 155925,                 // t6
		62.0 / 2835,                      // t5
		-17.0 / 315,                      // t4
		2.0 / 15,                         // t3
		-1.0 / 3,                         // t2
	}
	for i, v := range vals {
		for j := range t[i] {
			t[i][j] = v
		}
	}
	return
}()

// Tanh writes tanh(x) into dst for the largest multiple of 8 values of x,
// bitwise as Tanh32 computes it, and returns how many it
// wrote (0 when the vector kernel is not enabled).
func Tanh(dst, x []float32) int {
	n := len(x) &^ 7
	if !Enabled || n == 0 {
		return 0
	}
	_ = dst[n-1]
	tanhAVX(&dst[0], &x[0], n, &tanhTable)
	return n
}
