package vae_test

import (
	"path/filepath"
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

// Rows pushed off the data's two-factor subspace in one column get high
// negative-ELBO scores, are flagged above a threshold calibrated on normal
// rows, and name that column first (common practice, no source beyond
// the definitions).
func TestDensityScores(t *testing.T) {
	normal := ppcaData(2000, 8, 2, 0.3, 13, 1)
	calib := ppcaData(500, 8, 2, 0.3, 13, 2)
	test := ppcaData(200, 8, 2, 0.3, 13, 3)
	m, err := vae.New(vae.Config{Inputs: 8, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Seed: 1})
	require.NoError(t, err)
	trainenv.Fit(t, m, normal, nil, train.Settings{Epochs: 30, Optimizer: train.Optimizer{Rate: 3e-3}})
	th, err := m.Calibrate(calib.X, calib.Rows, anomaly.Config{FalseAlarm: 0.01})
	require.NoError(t, err)
	x := append([]float32(nil), test.X...)
	positive := make([]bool, test.Rows)
	for r := 0; r < test.Rows; r += 2 {
		x[r*8+5] += 6 // column 5 far off
		positive[r] = true
	}
	scores, err := m.Score(x, test.Rows, 2)
	require.NoError(t, err)
	v := make([]float64, len(scores))
	hits := 0
	for i, s := range scores {
		v[i] = s.Value
		require.Equal(t, th.Value, s.Threshold)
		if positive[i] && s.Top[0].Column == 5 {
			hits++
		}
	}
	auc, err := anomaly.ROCAUC(v, positive)
	require.NoError(t, err)
	prec, rec, err := anomaly.PrecisionRecall(v, positive, th.Value)
	require.NoError(t, err)
	t.Logf("AUC %.3f, precision %.3f, recall %.3f, column 5 named first in %d of 100", auc, prec, rec, hits)
	require.Greater(t, auc, 0.95)
	require.Greater(t, rec, 0.9)
	require.Greater(t, hits, 90)
	// the threshold travels with the model file
	p := filepath.Join(t.TempDir(), "v.qm")
	require.NoError(t, m.Save(p, nil))
	l, err := vae.Load(p)
	require.NoError(t, err)
	require.Equal(t, th, *l.Threshold)
	again, err := l.Score(x, test.Rows, 2)
	require.NoError(t, err)
	require.Equal(t, scores, again)
}
