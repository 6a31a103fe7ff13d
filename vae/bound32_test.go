package vae_test

import (
	"math"
	"testing"

	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

// The float32 fast path (every draw of a chunk of rows in one product)
// agrees with the reference path (all rows at once, float64 draws and
// likelihoods) for every likelihood, for the ELBO and the IWAE, to within
// 1e-4 of the bound's size plus 1e-3 nats: float32 rounding of the
// decoder's sums (a tolerance from the precision, common practice, no
// source). More rows than one chunk holds, so the chunking is crossed.
func TestFastBoundsMatchReference(t *testing.T) {
	fm := testenv.Fashion(t, "t10k")
	pp := ppcaData(400, 8, 2, 0.5, 4, 1)
	cases := []struct {
		name string
		cfg  vae.Config
		rows int
		x    []float32
	}{
		{"bernoulli images", vae.Config{Inputs: 784, Hidden: []int{64}, Latent: 6, Seed: 1}, 300, fm.X[:300*784]},
		{"gaussian", vae.Config{Inputs: 8, Hidden: []int{16}, Latent: 2, Likelihood: vae.Gaussian, Seed: 1}, 400, pp.X},
		{"gaussian learned", vae.Config{Inputs: 8, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Activation: layers.Tanh, Seed: 2}, 400, pp.X},
		{"gaussian shared", vae.Config{Inputs: 8, Hidden: []int{16}, Latent: 3, Likelihood: vae.GaussianShared, Seed: 3}, 400, pp.X},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			m, err := vae.New(c.cfg)
			require.NoError(t, err)
			d := fm
			if c.cfg.Inputs == 8 {
				d = pp
			}
			trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 1, BatchSize: 50})
			for _, samples := range []int{1, 16} {
				fast, err := m.ELBO(c.x, c.rows, samples, 7)
				require.NoError(t, err)
				ref, err := m.ELBORef(c.x, c.rows, samples, 7)
				require.NoError(t, err)
				for i := range ref {
					require.InDelta(t, ref[i], fast[i], 1e-4*math.Abs(ref[i])+1e-3, "ELBO row %d, %d samples", i, samples)
				}
			}
			fast, err := m.IWAE(c.x, c.rows, 5, 3)
			require.NoError(t, err)
			ref, err := m.IWAERef(c.x, c.rows, 5, 3)
			require.NoError(t, err)
			for i := range ref {
				require.InDelta(t, ref[i], fast[i], 1e-4*math.Abs(ref[i])+1e-3, "IWAE row %d", i)
			}
		})
	}
}

// The density score of 500 Fashion-MNIST images with 16 draws a row
// on a 784-400-20 VAE (untrained: the time does not depend on the
// weights), on the float32 path and on the reference path.
func BenchmarkNegELBO784(b *testing.B) {
	fm := testenv.Fashion(b, "t10k")
	m, err := vae.New(vae.Config{Inputs: 784, Hidden: []int{400}, Latent: 20, Seed: 1})
	require.NoError(b, err)
	x := fm.X[:500*784]
	b.Run("fast", func(b *testing.B) {
		for b.Loop() {
			m.ELBO(x, 500, vae.ScoreSamples, 1)
		}
	})
	b.Run("reference", func(b *testing.B) {
		for b.Loop() {
			m.ELBORef(x, 500, vae.ScoreSamples, 1)
		}
	})
}
