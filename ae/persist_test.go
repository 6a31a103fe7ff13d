package ae

import (
	"context"
	"path/filepath"
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

func allWeights(m *Model) [][]float64 {
	var w [][]float64
	for _, p := range m.Params() {
		w = append(w, p.Values())
	}
	return w
}

func TestSaveLoadRoundTrip(t *testing.T) {
	m, bc := trainedBC(t)
	_, err := m.Calibrate(bc.X[:300*30], 300, anomaly.Config{FalseAlarm: 0.05})
	require.NoError(t, err)
	p := filepath.Join(t.TempDir(), "m.qm")
	require.NoError(t, m.Save(p, &modelfile.Provenance{DataFile: "bc.csv", DataFingerprint: bc.Fingerprint()}))
	l, err := Load(p)
	require.NoError(t, err)
	require.Equal(t, allWeights(m), allWeights(l))
	a, err := m.Score(bc.X, bc.Rows, 2)
	require.NoError(t, err)
	b, err := l.Score(bc.X, bc.Rows, 2)
	require.NoError(t, err)
	require.Equal(t, a, b)
	f, err := modelfile.Read(p, 0)
	require.NoError(t, err)
	_, _, prov, err := FromFile(f)
	require.NoError(t, err)
	require.Equal(t, bc.Fingerprint(), prov.DataFingerprint)
	f.Kind = "vae"
	_, _, _, err = FromFile(f)
	require.Error(t, err)
}

// Training 2 epochs, checkpointing, restoring into a fresh process-like
// model and training 2 more gives bitwise the weights of 4 straight epochs.
func TestCheckpointResumeIsBitwise(t *testing.T) {
	bc := breastCancer(t)
	cfg := Config{Inputs: 30, Hidden: []int{8}, Latent: 3, Dropout: 0.1, Noise: Corruption{Kind: MaskingNoise, Level: 0.2}, Seed: 5}
	straight, err := New(cfg)
	require.NoError(t, err)
	h1, err := straight.Train(context.Background(), bc, nil, train.Config{Epochs: 4})
	require.NoError(t, err)

	first, err := New(cfg)
	require.NoError(t, err)
	ckpt := filepath.Join(t.TempDir(), "c.qm")
	_, err = first.Train(context.Background(), bc, nil, train.Config{Epochs: 4, OnEpoch: func(p train.Progress, h *train.History) error {
		if p.Epoch == 2 {
			f, err := first.File(nil, h)
			if err != nil {
				return err
			}
			if err := modelfile.Write(ckpt, f); err != nil {
				return err
			}
			return context.Canceled // stop as if killed
		}
		return nil
	}})
	require.ErrorIs(t, err, context.Canceled)
	f, err := modelfile.Read(ckpt, 0)
	require.NoError(t, err)
	resumed, h, _, err := FromFile(f)
	require.NoError(t, err)
	require.Len(t, h.Epochs, 2)
	h2, err := resumed.Train(context.Background(), bc, nil, train.Config{Epochs: 4, Start: h})
	require.NoError(t, err)
	require.Equal(t, allWeights(straight), allWeights(resumed))
	require.Equal(t, h1.Epochs, h2.Epochs)
}
