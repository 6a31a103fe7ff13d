package data

import (
	"testing"

	"github.com/stretchr/testify/require"
)

// GroupBy gathers each key's rows, in their order, as views of the one
// table (common practice, no source: a stable sort by key).
func TestGroupBy(t *testing.T) {
	d, err := New([]float32{0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5}, 6, 2)
	require.NoError(t, err)
	d.Labels = []int{0, 1, 2, 3, 4, 5}
	groups, ungrouped, err := d.GroupBy([]string{"b", "a", "", "b", "a", "c"})
	require.NoError(t, err)
	require.Equal(t, 1, ungrouped)
	require.Len(t, groups, 3)
	want := map[string][]float32{"a": {1, 1, 4, 4}, "b": {0, 0, 3, 3}, "c": {5, 5}}
	for i, k := range []string{"a", "b", "c"} {
		require.Equal(t, k, groups[i].Key)
		require.Equal(t, want[k], groups[i].Data.X)
		require.Equal(t, len(want[k])/2, len(groups[i].Data.Labels))
	}
	require.Equal(t, []int{1, 4}, groups[0].Data.Labels)
	require.Equal(t, float32(2), d.X[10], "the ungrouped row is not last")
	// views: no copy
	groups[0].Data.X[0] = 9
	require.Equal(t, float32(9), d.X[0])
	_, _, err = d.GroupBy([]string{"a"})
	require.ErrorIs(t, err, ErrConfig)
}
