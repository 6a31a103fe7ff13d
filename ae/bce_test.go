package ae_test

import (
	"math"
	"testing"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

// A BCE autoencoder's scores come from the decoder's logits in float32;
// they equal the float64 binary cross-entropy of the reconstruction's
// probabilities (losses.BCEProbabilityElem, the reference) to within
// 1e-5 relative (float32 rounding; a tolerance from the precision, common
// practice, no source), and a row's Score value is its RowErrors value
// bit for bit.
func TestBCEScoresFromLogits(t *testing.T) {
	fm := testenv.Fashion(t, "t10k")
	m, err := ae.New(ae.Config{Inputs: 784, Hidden: []int{64}, Latent: 8, Loss: ae.BCE, Scaling: data.ScaleNone, Seed: 1})
	require.NoError(t, err)
	trainenv.Fit(t, m, fm, nil, train.Settings{Epochs: 1, BatchSize: 100})
	n := 200
	x := fm.X[:n*784]
	got, err := m.RowErrors(x, n)
	require.NoError(t, err)
	rec, err := m.Reconstruct(x, n)
	require.NoError(t, err)
	for r := 0; r < n; r++ {
		var want float64
		for j := 0; j < 784; j++ {
			want += losses.BCEProbabilityElem(float64(rec[r*784+j]), float64(x[r*784+j]))
		}
		want /= 784
		require.InDelta(t, want, got[r], 1e-5*want, "row %d", r)
	}
	_, err = m.Calibrate(x, n, anomaly.Config{FalseAlarm: 0.05})
	require.NoError(t, err)
	s, err := m.Score(x, n, 3)
	require.NoError(t, err)
	for r := range s {
		require.Equal(t, got[r], s[r].Value, "row %d: Score and RowErrors agree", r)
		require.False(t, math.IsInf(s[r].Value, 0))
	}
}
