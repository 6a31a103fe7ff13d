package vec_test

import (
	"math"
	"testing"

	"github.com/quernlab/quern/internal/kernel/vec"
	"github.com/stretchr/testify/require"
)

// ExpNeg32 against Go's math.Exp in float64 (the reference) over the whole
// range it serves, and zero where exp(-a) is below float32's normal range.
func TestExpNeg32Accuracy(t *testing.T) {
	worst := 0.0
	for a := 0.0; a < 87.3; a += 0.00731 {
		want := math.Exp(-a)
		got := float64(vec.ExpNeg32(float32(a)))
		// float32(a) differs from a; compare with exp of what was passed
		want = math.Exp(-float64(float32(a)))
		rel := math.Abs(got-want) / want
		worst = max(worst, rel)
		require.Less(t, rel, 3e-7, "a=%v: %v against %v", a, got, want)
	}
	t.Logf("largest relative error %.3g", worst)
	for _, a := range []float32{87.4, 100, 1e30, float32(math.Inf(1))} {
		require.Zero(t, vec.ExpNeg32(a), "a=%v", a)
	}
}

// Tanh32 against Go's math.Tanh in float64 (the reference), densely across
// the switch from the series to the exponential form at |x| = 0.35.
func TestTanh32Accuracy(t *testing.T) {
	worst := 0.0
	for x := -12.0; x <= 12; x += 0.000731 {
		x32 := float32(x)
		want := math.Tanh(float64(x32))
		got := float64(vec.Tanh32(x32))
		if want == 0 {
			require.Zero(t, got)
			continue
		}
		rel := math.Abs(got-want) / math.Abs(want)
		worst = max(worst, rel)
		require.Less(t, rel, 2.5e-7, "x=%v: %v against %v", x32, got, want)
	}
	t.Logf("largest relative error %.3g", worst)
	require.Equal(t, float32(1), vec.Tanh32(float32(math.Inf(1))))
	require.Equal(t, float32(-1), vec.Tanh32(-100))
}

// Exp32 against Go's math.Exp (the reference) across the range the
// log-variances and logits of the models use, both signs.
func TestExp32Accuracy(t *testing.T) {
	for x := -80.0; x <= 80; x += 0.0137 {
		x32 := float32(x)
		want := math.Exp(float64(x32))
		got := float64(vec.Exp32(x32))
		require.InDelta(t, want, got, 3.5e-7*want, "x=%v", x32)
	}
	require.True(t, math.IsInf(float64(vec.Exp32(100)), 1))
	require.Zero(t, vec.Exp32(-100))
}

// The vector tanh gives bitwise what Tanh32 gives (the same operations in
// the same order), densely across both branches and their boundary,
// signed zeros, tiny and huge values.
func TestVectorTanhMatchesTanh32(t *testing.T) {
	var xs []float32
	for x := -30.0; x <= 30; x += 0.000917 {
		xs = append(xs, float32(x))
	}
	xs = append(xs, 0, float32(math.Copysign(0, -1)), 0.35, -0.35, math.Nextafter32(0.35, 0), 1e-30, -1e-30, 43.65, 43.7, 1e30, -1e30)
	for len(xs)%8 != 0 {
		xs = append(xs, 1)
	}
	got := make([]float32, len(xs))
	done := vec.Tanh(got, xs)
	if done == 0 {
		t.Skip("no vector kernel on this CPU or build")
	}
	require.Equal(t, len(xs), done)
	for i, x := range xs {
		require.Equal(t, math.Float32bits(vec.Tanh32(x)), math.Float32bits(got[i]), "x=%v", x)
	}
}
func TestLog1pExpNegAccuracy(t *testing.T) {
	// against math.Log1p(math.Exp(-a)) in float64 (reference), across the
	// switch between the series and the logarithm
	for a := 0.0; a < 30; a += 0.013 {
		want := math.Log1p(math.Exp(-a))
		got := float64(vec.Log1pExpNeg32(float32(a)))
		require.InDelta(t, want, got, 1e-7+1e-6*want, "a=%v", a)
	}
}

// The slice forms give bitwise what the scalar functions give, vector
// kernel or not, and Softplus32 stays finite and accurate far out
// (against math.Log1p(math.Exp(v)) in float64, the reference).
func TestApplyMatchesScalar(t *testing.T) {
	var xs []float32
	for x := -40.0; x <= 40; x += 0.0137 {
		xs = append(xs, float32(x))
	}
	xs = append(xs, 0, float32(math.Copysign(0, -1)), 1e-30, -1e30, 1e30)
	o := make([]float32, len(xs))
	for _, c := range []struct {
		name   string
		slice  func(o, x []float32)
		scalar func(float32) float32
	}{{"tanh", vec.ApplyTanh, vec.Tanh32}, {"sigmoid", vec.ApplySigmoid, vec.Sigmoid32}, {"softplus", vec.ApplySoftplus, vec.Softplus32}} {
		c.slice(o, xs)
		for i, x := range xs {
			require.Equal(t, math.Float32bits(c.scalar(x)), math.Float32bits(o[i]), "%s(%v)", c.name, x)
		}
	}
	for v := -30.0; v < 30; v += 0.071 {
		v32 := float32(v)
		want := math.Log1p(math.Exp(float64(v32)))
		require.InDelta(t, want, float64(vec.Softplus32(v32)), 1e-7+3e-7*want, "v=%v", v32)
	}
	require.Equal(t, float32(1e30), vec.Softplus32(1e30))
}
