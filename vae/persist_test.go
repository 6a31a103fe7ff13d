package vae

import (
	"context"
	"math"
	"path/filepath"
	"runtime"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

func TestCheckpointResumeIsBitwise(t *testing.T) {
	d := ppcaData(300, 8, 2, 0.5, 11, 1)
	cfg := Config{Inputs: 8, Hidden: []int{8}, Latent: 2, Likelihood: GaussianLearned, Schedule: BetaSchedule{Kind: Cyclical, Steps: 7}, FreeBits: 0.1, Seed: 5}
	straight, err := New(cfg)
	require.NoError(t, err)
	_, err = straight.Train(context.Background(), d, nil, train.Config{Epochs: 4, BatchSize: 32})
	require.NoError(t, err)
	first, err := New(cfg)
	require.NoError(t, err)
	ckpt := filepath.Join(t.TempDir(), "c.qm")
	_, err = first.Train(context.Background(), d, nil, train.Config{Epochs: 4, BatchSize: 32, OnEpoch: func(p train.Progress, h *train.History) error {
		if p.Epoch == 2 {
			f, err := first.File(nil, h)
			require.NoError(t, err)
			require.NoError(t, modelfile.Write(ckpt, f))
			return context.Canceled
		}
		return nil
	}})
	require.ErrorIs(t, err, context.Canceled)
	f, err := modelfile.Read(ckpt, 0)
	require.NoError(t, err)
	resumed, h, _, err := FromFile(f)
	require.NoError(t, err)
	_, err = resumed.Train(context.Background(), d, nil, train.Config{Epochs: 4, BatchSize: 32, Start: h})
	require.NoError(t, err)
	for i, p := range straight.Params() {
		require.Equal(t, p.Values(), resumed.Params()[i].Values(), p.Name())
	}
	// a plain save loads back to the same sampler
	p := filepath.Join(t.TempDir(), "m.qm")
	require.NoError(t, resumed.Save(p, nil))
	l, err := Load(p)
	require.NoError(t, err)
	a, _ := resumed.Sample(4, 1)
	b, _ := l.Sample(4, 1)
	require.Equal(t, a, b)
}

// The same seed gives bitwise the same model whatever the thread count:
// the matrix products and element-wise loops that run in parallel compute
// each element in one goroutine, in one order.
func TestSameModelAtAnyThreadCount(t *testing.T) {
	d := ppcaData(2000, 8, 2, 0.5, 12, 1)
	x := make([]float32, 0, 2000*784)
	for i := 0; i < 2000*784; i++ {
		v := float64(d.X[i%len(d.X)])
		x = append(x, float32(0.5+0.5*math.Tanh(v))) // into (0, 1)
	}
	big, err := data.New(x, 2000, 784)
	require.NoError(t, err)
	run := func(procs int) [][]float64 {
		old := runtime.GOMAXPROCS(procs)
		defer runtime.GOMAXPROCS(old)
		m, err := New(Config{Inputs: 784, Hidden: []int{256}, Latent: 8, Scaling: data.ScaleNone, Seed: 3})
		require.NoError(t, err)
		_, err = m.Train(context.Background(), big, nil, train.Config{Epochs: 1, BatchSize: 256})
		require.NoError(t, err)
		var w [][]float64
		for _, p := range m.Params() {
			w = append(w, p.Values())
		}
		return w
	}
	require.Equal(t, run(1), run(2))
}
