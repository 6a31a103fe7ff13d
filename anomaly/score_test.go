package anomaly

import (
	"math/rand/v2"
	"sort"
	"testing"

	"github.com/stretchr/testify/require"
)

// The partial selection names the same columns, in the same order, as a
// stable sort of all of them (largest first, ties by column order), for
// any top, with ties and zeros. The stable sort is the reference.
func TestAssessTopMatchesStableSort(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for trial := 0; trial < 500; trial++ {
		n := 1 + rng.IntN(40)
		c := make([]float64, n)
		for j := range c {
			c[j] = float64(rng.IntN(6)) // many ties
		}
		top := rng.IntN(n + 3)
		got := Assess(1, c, nil, top, Threshold{Value: 2})
		idx := make([]int, n)
		for j := range idx {
			idx[j] = j
		}
		sort.SliceStable(idx, func(a, b int) bool { return c[idx[a]] > c[idx[b]] })
		want := idx[:min(top, n)]
		require.Len(t, got.Top, len(want))
		for i, f := range got.Top {
			require.Equal(t, want[i], f.Column, "trial %d: %v top %d", trial, c, top)
		}
	}
}
