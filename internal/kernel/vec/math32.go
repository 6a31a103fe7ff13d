package vec

import (
	"math"

	"github.com/chewxy/math32"
)

// The float32 elementary functions of quern's fused operations and
// graph-free passes, in plain Go (the vector kernels above compute the same
// expressions, eight lanes at a time, and are tested bitwise against
// these).

// ExpNeg32 is exp(-a) for a >= 0 in float32: a = k ln2 + r with |r| <=
// ln2/2 (ln2 split in two parts so that k ln2 is exact), exp(r) by its
// Taylor series to degree 7 (remainder below 6e-9 relative), scaled by
// 2^-k through the exponent bits. Below exp(-87.3), the smallest normal
// float32's order, it returns 0.
func ExpNeg32(a float32) float32 {
	if a > 87.3 {
		return 0
	}
	const (
		log2e = 1.44269504088896341
		ln2hi = 0.693359375
		ln2lo = -2.12194440e-4
	)
	k := float32(int32(a*log2e + 0.5))
	r := k*ln2hi - a + k*ln2lo // -a - (-k) ln2
	p := 1 + r*(1+r*(1.0/2+r*(1.0/6+r*(1.0/24+r*(1.0/120+r*(1.0/720+r*(1.0/5040)))))))
	return p * math.Float32frombits(uint32(127-int32(k))<<23)
}

// Exp32 is exp(x) in float32 by ExpNeg32: directly for x <= 0, as the
// reciprocal of exp(-x) above (one more rounding; +Inf beyond 87.3).
func Exp32(x float32) float32 {
	if x <= 0 {
		return ExpNeg32(-x)
	}
	return 1 / ExpNeg32(x)
}

// Log1pExpNeg32 is log(1 + exp(-a)) for a >= 0 in float32 arithmetic.
// With e = exp(-a) in (0, 1] and s = e/(2+e) in (0, 1/3],
// log(1+e) = 2 atanh(s) = 2 (s + s^3/3 + s^5/5 + ...); seven terms leave a
// truncation error below 1e-8, under float32's own rounding.
func Log1pExpNeg32(a float32) float32 {
	e := ExpNeg32(a)
	s := e / (2 + e)
	s2 := s * s
	return 2 * s * (1 + s2*(1.0/3+s2*(1.0/5+s2*(1.0/7+s2*(1.0/9+s2*(1.0/11+s2*(1.0/13)))))))
}

// Tanh32 is the hyperbolic tangent in float32: its Taylor series to
// degree 13 below |x| = 0.35 (truncation below 2e-8 relative), else
// (1 - e)/(1 + e) with e = exp(-2|x|) >= 0.5 away from cancellation; the
// sign is copied from x.
func Tanh32(x float32) float32 {
	bits := math.Float32bits(x)
	a := math.Float32frombits(bits &^ (1 << 31))
	var t float32
	if a < 0.35 {
		a2 := a * a
		t = a * (1 + a2*(-1.0/3+a2*(2.0/15+a2*(-17.0/315+a2*(62.0/2835+a2*(-1382.0/155925+a2*(21844.0/6081075)))))))
	} else {
		e := ExpNeg32(2 * a)
		t = (1 - e) / (1 + e)
	}
	return math.Float32frombits(math.Float32bits(t) | bits&(1<<31))
}

// Sigmoid32 is 1/(1+exp(-v)) for v >= 0 and exp(v)/(1+exp(v)) below (no
// overflow), in float32.
func Sigmoid32(v float32) float32 {
	e := ExpNeg32(math32.Abs(v))
	if v >= 0 {
		return 1 / (1 + e)
	}
	return e / (1 + e)
}

// Softplus32 is log(1 + exp(v)) = max(v, 0) + log(1 + exp(-|v|)), finite
// for every finite v, in float32.
func Softplus32(v float32) float32 { return math32.Max(v, 0) + Log1pExpNeg32(math32.Abs(v)) }

// ApplyTanh writes Tanh32 of each value of x into o (the vector kernel
// where the CPU has one, bitwise the same).
func ApplyTanh(o, x []float32) {
	o = o[:len(x)]
	done := Tanh(o, x)
	for i, v := range x[done:] {
		o[done+i] = Tanh32(v)
	}
}

// ApplySigmoid writes Sigmoid32 of each value of x into o.
func ApplySigmoid(o, x []float32) {
	o = o[:len(x)]
	for i, v := range x {
		o[i] = Sigmoid32(v)
	}
}

// ApplySoftplus writes Softplus32 of each value of x into o.
func ApplySoftplus(o, x []float32) {
	o = o[:len(x)]
	for i, v := range x {
		o[i] = Softplus32(v)
	}
}

// ApplyLeaky writes x (or slope*x where x's sign bit is set) into o, or,
// with g not nil, g (or slope*g there): leaky ReLU (ReLU at slope 0) and
// its gradient, without branches on the sign, which mispredict half the
// time on activations: the factor (1 or slope) is chosen by masking with
// the sign bit, so -0 takes the slope too. The vector kernel where the CPU
// has one, bitwise the same.
func ApplyLeaky(o, x, g []float32, slope float32) {
	done := Leaky(o, x, g, slope)
	o, x = o[done:len(x)], x[done:]
	if g != nil {
		g = g[done:]
	}
	const one = 0x3f800000 // float32 1
	diff := one ^ math.Float32bits(slope)
	if g == nil {
		for i, v := range x {
			m := uint32(int32(math.Float32bits(v)) >> 31)
			o[i] = v * math.Float32frombits(one^(diff&m))
		}
		return
	}
	g = g[:len(x)]
	for i, v := range x {
		m := uint32(int32(math.Float32bits(v)) >> 31)
		o[i] = g[i] * math.Float32frombits(one^(diff&m))
	}
}
