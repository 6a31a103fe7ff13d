package vec_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/kernel/vec"
	"github.com/stretchr/testify/require"
)

// NonFinite finds NaN and both infinities at every position it looks at,
// passes the largest finite values and subnormals, and says how many
// values it looked at.
func TestNonFinite(t *testing.T) {
	for _, n := range []int{0, 7, 8, 9, 40} {
		g := make([]float32, n)
		for i := range g {
			g[i] = float32(i) - 5
		}
		if n > 2 {
			g[0], g[1], g[2] = math.MaxFloat32, -math.MaxFloat32, math.SmallestNonzeroFloat32
		}
		bad, done := vec.NonFinite(g)
		require.False(t, bad, "n=%d finite", n)
		if !vec.Enabled {
			require.Zero(t, done)
			continue
		}
		require.Equal(t, n&^7, done)
		for pos := 0; pos < done; pos++ {
			for _, v := range []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))} {
				old := g[pos]
				g[pos] = v
				bad, _ := vec.NonFinite(g)
				require.True(t, bad, "n=%d %v at %d", n, v, pos)
				g[pos] = old
			}
		}
	}
}

// Add and Leaky give bitwise what the plain loops give (the same single
// operation per element), over lengths around the vector width, with
// negative zero and both signs.
func TestAddAndLeakyMatchLoops(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	for _, n := range []int{0, 1, 8, 13, 64, 67} {
		x, y, g := make([]float32, n), make([]float32, n), make([]float32, n)
		for i := range x {
			x[i] = float32(rng.NormFloat64())
			y[i] = float32(rng.NormFloat64())
			g[i] = float32(rng.NormFloat64())
		}
		if n > 1 {
			x[0], x[1] = float32(math.Copysign(0, -1)), 0
		}
		sum := append([]float32(nil), y...)
		done := vec.Add(sum, x)
		for i := range sum {
			want := y[i] + x[i]
			if i >= done {
				sum[i] += x[i]
			}
			require.Equal(t, math.Float32bits(want), math.Float32bits(sum[i]), "add n=%d i=%d", n, i)
		}
		for _, grad := range [][]float32{nil, g} {
			out := make([]float32, n)
			done := vec.Leaky(out, x, grad, 0.2)
			for i := done; i < n; i++ {
				out[i] = math.Float32frombits(0x7fc00000) // the caller's part: left as NaN
			}
			for i := 0; i < done; i++ {
				f := float32(1)
				if math.Signbit(float64(x[i])) {
					f = 0.2
				}
				want := x[i] * f
				if grad != nil {
					want = grad[i] * f
				}
				require.Equal(t, math.Float32bits(want), math.Float32bits(out[i]), "leaky n=%d i=%d grad=%v", n, i, grad != nil)
			}
		}
	}
}

// SqErr and ScaledDiff give bitwise what the plain loops give: the same
// float64 difference, rounded square and sum per accumulator in the same
// order, and the same float32 difference and product (common practice,
// no source: the kernels must not change the arithmetic).
func TestSqErrAndScaledDiffMatchLoops(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	for _, n := range []int{0, 3, 4, 8, 13, 64, 4099} {
		p, q := make([]float32, n), make([]float32, n)
		for i := range p {
			p[i] = float32(rng.NormFloat64() * math.Pow(10, float64(rng.IntN(9)-4)))
			q[i] = float32(rng.NormFloat64())
		}
		if n > 3 {
			p[0], p[1], p[2] = float32(math.Copysign(0, -1)), math.Float32frombits(1), math.MaxFloat32
		}
		acc := [4]float64{0.5, -1, 2, 0}
		want := acc
		done := vec.SqErr(&acc, p, q)
		for i := 0; i < done; i++ {
			d := float64(p[i]) - float64(q[i])
			want[i%4] += float64(d * d)
		}
		for i := range acc {
			require.Equal(t, math.Float64bits(want[i]), math.Float64bits(acc[i]), "SqErr n=%d lane %d", n, i)
		}
		if vec.Enabled {
			require.Equal(t, n&^3, done, "SqErr n=%d", n)
		}
		out := make([]float32, n)
		done = vec.ScaledDiff(out, p, q, -0.37)
		for i := 0; i < done; i++ {
			w := float32(-0.37) * (p[i] - q[i])
			require.Equal(t, math.Float32bits(w), math.Float32bits(out[i]), "ScaledDiff n=%d i=%d", n, i)
		}
		if vec.Enabled {
			require.Equal(t, n&^7, done, "ScaledDiff n=%d", n)
		}
	}
}
