package gan

import (
	"context"
	"path/filepath"
	"testing"

	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

func TestCheckpointResumeIsBitwise(t *testing.T) {
	d := ring(512, 3)
	cfg := Config{Outputs: 2, Noise: 3, GenHidden: []int{8}, DiscHidden: []int{8}, Critic: Wasserstein, DiscSteps: 2, Classes: 8, Pack: 2, Seed: 5}
	straight, err := New(cfg)
	require.NoError(t, err)
	_, err = straight.Train(context.Background(), d, nil, train.Config{Epochs: 4})
	require.NoError(t, err)
	first, err := New(cfg)
	require.NoError(t, err)
	ckpt := filepath.Join(t.TempDir(), "c.qm")
	_, err = first.Train(context.Background(), d, nil, train.Config{Epochs: 4, OnEpoch: func(p train.Progress, h *train.History) error {
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
	_, err = resumed.Train(context.Background(), d, nil, train.Config{Epochs: 4, Start: h})
	require.NoError(t, err)
	for i, p := range straight.Params() {
		require.Equal(t, p.Values(), resumed.Params()[i].Values(), p.Name())
	}
	require.Equal(t, straight.SpectralU, resumed.SpectralU)
	p := filepath.Join(t.TempDir(), "m.qm")
	require.NoError(t, resumed.Save(p, nil))
	l, err := Load(p)
	require.NoError(t, err)
	a, _ := resumed.Generate(6, 1, 3)
	b, _ := l.Generate(6, 1, 3)
	require.Equal(t, a, b)
	x := d.X[:8]
	da, err := resumed.Discriminate(x, 4, []int{0, 1, 2, 3})
	require.NoError(t, err)
	db, err := l.Discriminate(x, 4, []int{0, 1, 2, 3})
	require.NoError(t, err)
	require.Equal(t, da, db)
}
