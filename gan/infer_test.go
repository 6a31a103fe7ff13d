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
	a, _ := m.Generate(10, 5, 1)
	b, _ := m.GenerateInto(nil, 10, 5, 1)
	require.Equal(t, a, b)
	_, err = m.Generate(1, 1, 2)
	require.Error(t, err)
	s, err := m.Sample(4, 7)
	require.NoError(t, err)
	g, err := m.Generate(4, 7, -1)
	require.NoError(t, err)
	require.Equal(t, g, s)
}
