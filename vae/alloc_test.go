package vae

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
// programs exist, at one thread. Skipped in race builds, whose
// instrumentation allocates.
func TestTrainStepAllocatesNothing(t *testing.T) {
	if raceBuild {
		t.Skip("the race detector's instrumentation allocates")
	}
	old := runtime.GOMAXPROCS(1)
	defer runtime.GOMAXPROCS(old)
	const batch, inputs = 32, 40
	rng := rand.New(rand.NewPCG(1, 1))
	x := make([]float32, inputs*batch)
	for i := range x {
		x[i] = rng.Float32()
	}
	d, err := data.New(x, batch, inputs)
	require.NoError(t, err)
	m, err := New(Config{Inputs: inputs, Hidden: []int{24}, Latent: 4, Scaling: data.ScaleNone, Seed: 1})
	require.NoError(t, err)
	_, err = m.Train(context.Background(), d, nil, train.Config{Epochs: 1, BatchSize: batch})
	require.NoError(t, err)
	tb := train.Batch{Rows: batch, Cols: inputs, X: x}
	var stepErr error
	allocs := testing.AllocsPerRun(20, func() {
		if _, err := (trainee{m}).Step(context.Background(), tb); err != nil {
			stepErr = err
		}
	})
	require.NoError(t, stepErr)
	require.Zero(t, allocs, "allocations per step")
}
