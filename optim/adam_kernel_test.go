//go:build !amd64.v3

package optim

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// The vector Adam kernel gives bitwise the results of the Go loop (the
// same operations in the same order, no fused multiply-add) for plain
// Adam, decoupled and coupled weight decay, over several steps and odd
// lengths. Builds for amd64.v3, where the Go compiler itself fuses
// multiply-adds, are left out.
func TestAdamVectorKernelMatchesLoop(t *testing.T) {
	t.Logf("vector kernel in use: %v", haveAVX)
	rng := rand.New(rand.NewPCG(1, 1))
	for _, n := range []int{1, 7, 8, 9, 63, 1000} {
		for _, k := range []adamCoef{
			{lr: 1e-3, b1: 0.9, b2: 0.999, eps: 1e-8},
			{lr: 2e-4, b1: 0.5, b2: 0.999, eps: 1e-8, wd: 0.01, decoupled: true},
			{lr: 1e-2, b1: 0.9, b2: 0.99, eps: 1e-6, wd: 0.1},
		} {
			w := make([]float32, n)
			for i := range w {
				w[i] = float32(rng.NormFloat64())
			}
			w2 := append([]float32(nil), w...)
			m, v := make([]float32, n), make([]float32, n)
			m2, v2 := make([]float32, n), make([]float32, n)
			g := make([]float32, n)
			for step := 1; step <= 5; step++ {
				for i := range g {
					g[i] = float32(rng.NormFloat64() * math.Pow(10, float64(rng.IntN(7)-4)))
				}
				k.bc1 = 1 - math.Pow(k.b1, float64(step))
				k.sbc2 = math.Sqrt(1 - math.Pow(k.b2, float64(step)))
				adam32(w, g, m, v, k)
				adam32Fast(w2, g, m2, v2, k)
			}
			for i := range w {
				require.Equal(t, math.Float32bits(w[i]), math.Float32bits(w2[i]), "n=%d %+v weight %d: %v against %v", n, k, i, w2[i], w[i])
				require.Equal(t, math.Float32bits(m[i]), math.Float32bits(m2[i]), "n=%d first moment %d", n, i)
				require.Equal(t, math.Float32bits(v[i]), math.Float32bits(v2[i]), "n=%d second moment %d", n, i)
			}
		}
	}
}
