package engine

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/kernel/vec"
	"github.com/stretchr/testify/require"
)

// The vector BCE kernel agrees with the scalar Go loop (the same method;
// the vector one rounds differently through fused multiply-adds): every
// gradient within 2e-7, each block's loss within 1e-6 relative, and a NaN
// logit makes the loss NaN.
func TestBCEVectorMatchesScalar(t *testing.T) {
	if !vec.Enabled {
		t.Skip("no AVX2/FMA on this CPU")
	}
	rng := rand.New(rand.NewPCG(5, 5))
	n := 3*bceBlock + 13
	x, y := make([]float32, n), make([]float32, n)
	for i := range x {
		x[i] = float32(rng.NormFloat64() * 8)
		y[i] = rng.Float32()
	}
	// a Go constant -0.0 is +0: negative zero comes from Copysign
	x[0], x[1], x[2], x[3] = 0, float32(math.Copysign(0, -1)), 200, -200
	require.True(t, math.Signbit(float64(x[1])), "x[1] is negative zero")
	run := func(vector bool) ([]float64, []float32) {
		saved := vec.Enabled
		vec.Enabled = vector
		defer func() { vec.Enabled = saved }()
		part, d := make([]float64, 4), make([]float32, n)
		bceSumBlocks32(part, d, x, y, 0, n)
		return part, d
	}
	pv, dv := run(true)
	ps, ds := run(false)
	for i := range dv {
		require.InDelta(t, ds[i], dv[i], 2e-7, "gradient at %d (x=%v)", i, x[i])
	}
	for b := range pv {
		require.InDelta(t, ps[b], pv[b], 1e-6*math.Abs(ps[b]), "block %d", b)
	}
	x[9] = float32(math.NaN())
	pn, _ := run(true)
	require.True(t, math.IsNaN(pn[0]), "a NaN logit gives a NaN loss")
}
