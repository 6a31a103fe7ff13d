package vec_test

import (
	"math"
	"testing"

	"github.com/quernlab/quern/internal/vec"
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
