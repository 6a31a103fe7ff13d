package gan

import (
	"context"
	"math/rand/v2"
	"runtime"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

// A training step (a discriminator and a generator update) allocates
// nothing once the programs exist, at one thread. Skipped in race
// builds, whose instrumentation allocates.
func TestTrainStepAllocatesNothing(t *testing.T) {
	if raceBuild {
		t.Skip("the race detector's instrumentation allocates")
	}
	old := runtime.GOMAXPROCS(1)
	defer runtime.GOMAXPROCS(old)
	const batch, outputs = 32, 30
	rng := rand.New(rand.NewPCG(1, 1))
	x := make([]float32, outputs*batch)
	for i := range x {
		x[i] = rng.Float32()
	}
	d, err := data.New(x, batch, outputs)
	require.NoError(t, err)
	m, err := New(Config{Outputs: outputs, Noise: 8, GenHidden: []int{16}, DiscHidden: []int{16}, Activation: layers.LeakyReLU,
		LeakySlope: 0.2, GenOutput: layers.Tanh, Scaling: data.ScaleNone, Seed: 1})
	require.NoError(t, err)
	require.NoError(t, m.prepare(d, nil))
	tb := train.Batch{Rows: batch, Cols: outputs, X: x}
	_, err = (trainee{m}).Step(context.Background(), tb)
	require.NoError(t, err)
	var stepErr error
	allocs := testing.AllocsPerRun(20, func() {
		if _, err := (trainee{m}).Step(context.Background(), tb); err != nil {
			stepErr = err
		}
	})
	require.NoError(t, stepErr)
	require.Zero(t, allocs, "allocations per step")
}
