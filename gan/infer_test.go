package gan

import (
	"testing"

	"github.com/quernlab/quern/internal/testenv"
	"github.com/stretchr/testify/require"
)

// GenerateInto gives Generate's rows and allocates nothing once its
// buffers are warm; a class outside the model's is an error.
func TestGenerateIntoAllocatesNothing(t *testing.T) {
	m, err := New(Config{Outputs: 3, Noise: 4, GenHidden: []int{8}, Classes: 2, Seed: 1})
	require.NoError(t, err)
	dst := make([]float32, 30)
	_, err = m.GenerateInto(dst, 10, 1, -1)
	require.NoError(t, err)
	if !testenv.RaceBuild { // the race detector's instrumentation allocates
		require.Zero(t, testing.AllocsPerRun(50, func() { _, _ = m.GenerateInto(dst, 10, 1, 1) }))
	}
	// the rows land in dst; the same seed and class give the same rows,
	// another seed or class other rows
	out, err := m.GenerateInto(dst, 10, 5, 1)
	require.NoError(t, err)
	require.Same(t, &dst[0], &out[0])
	a := append([]float32(nil), out...)
	again, err := m.GenerateInto(make([]float32, 30), 10, 5, 1)
	require.NoError(t, err)
	require.Equal(t, a, again)
	for _, other := range [][2]int{{6, 1}, {5, 0}} {
		o, err := m.GenerateInto(nil, 10, uint64(other[0]), other[1])
		require.NoError(t, err)
		require.NotEqual(t, a, o, "seed %d class %d", other[0], other[1])
	}
	_, err = m.Generate(1, 1, 2)
	require.Error(t, err)
}
