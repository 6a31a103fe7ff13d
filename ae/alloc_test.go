package ae

import (
	"context"
	"math/rand/v2"
	"runtime"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

// A training step (forward, backward, Adam) allocates nothing once the
// programs exist, at one thread (more threads start goroutines). Skipped
// in race builds, whose instrumentation allocates.
func TestTrainStepAllocatesNothing(t *testing.T) {
	if raceBuild {
		t.Skip("the race detector's instrumentation allocates")
	}
	old := runtime.GOMAXPROCS(1)
	defer runtime.GOMAXPROCS(old)
	for _, cfg := range []Config{
		{Inputs: 16, Hidden: []int{8}, Latent: 2, Scaling: data.ScaleNone, Seed: 1},
		{Inputs: 40, Hidden: []int{24}, Latent: 6, Scaling: data.ScaleNone, Seed: 1},
	} {
		const batch = 32
		rng := rand.New(rand.NewPCG(1, 1))
		x := make([]float32, cfg.Inputs*batch)
		for i := range x {
			x[i] = rng.Float32()
		}
		d, err := data.New(x, batch, cfg.Inputs)
		require.NoError(t, err)
		m, err := New(cfg)
		require.NoError(t, err)
		_, err = m.Train(context.Background(), d, nil, train.Config{Epochs: 1, BatchSize: batch})
		require.NoError(t, err)
		tb := train.Batch{Rows: batch, Cols: cfg.Inputs, X: x}
		var stepErr error
		allocs := testing.AllocsPerRun(20, func() {
			if _, err := (trainee{m}).Step(context.Background(), tb); err != nil {
				stepErr = err
			}
		})
		require.NoError(t, stepErr)
		require.Zero(t, allocs, "allocations per step, %d inputs", cfg.Inputs)
	}
}
