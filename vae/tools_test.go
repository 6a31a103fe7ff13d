package vae_test

import (
	"context"
	"math"
	"testing"

	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

func smallModel(t testing.TB) (*vae.Model, []float32) {
	d := ppcaData(400, 8, 2, 0.5, 7, 1)
	m, err := vae.New(vae.Config{Inputs: 8, Hidden: []int{16}, Latent: 3, Likelihood: vae.GaussianLearned, Seed: 3})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 3})
	return m, d.X
}

func TestLatentToolsAreDeterministic(t *testing.T) {
	m, x := smallModel(t)
	a, err := m.Sample(5, 42)
	require.NoError(t, err)
	b, err := m.Sample(5, 42)
	require.NoError(t, err)
	c, err := m.Sample(5, 43)
	require.NoError(t, err)
	require.Equal(t, a, b)
	require.NotEqual(t, a, c)
	require.Len(t, a, 40)

	for _, p := range []vae.Path{vae.Lerp, vae.Slerp} {
		path, err := m.Interpolate(x[:8], x[8:16], 5, p)
		require.NoError(t, err)
		require.Len(t, path, 40)
		r0, _ := m.Reconstruct(x[:8], 1)
		r1, _ := m.Reconstruct(x[8:16], 1)
		require.InDeltaSlice(t, r0, path[:8], 1e-4, "path starts at the first row's reconstruction")
		require.InDeltaSlice(t, r1, path[32:], 1e-4)
	}
	tr, err := m.Traverse(x[:8], 1, []float64{-2, 0, 2})
	require.NoError(t, err)
	require.Len(t, tr, 24)
	_, err = m.Traverse(x[:8], 3, []float64{0})
	require.Error(t, err)

	ix, err := m.NewIndex(x[:80], 10)
	require.NoError(t, err)
	nn, err := ix.Nearest(x[24:32], 3)
	require.NoError(t, err)
	require.Equal(t, 3, nn[0].Row)
	require.Equal(t, 0.0, nn[0].Distance)
	require.LessOrEqual(t, nn[1].Distance, nn[2].Distance)
}

// Slerp between codes of equal norm keeps that norm and bisects the angle
// (closed form); lerp passes through the midpoint.
func TestInterpolateLatentGeometry(t *testing.T) {
	a, b := []float32{2, 0}, []float32{0, 2}
	s, err := vae.InterpolateLatent(a, b, 3, vae.Slerp)
	require.NoError(t, err)
	require.InDelta(t, math.Sqrt2, s[2], 1e-6)
	require.InDelta(t, math.Sqrt2, s[3], 1e-6)
	l, err := vae.InterpolateLatent(a, b, 3, vae.Lerp)
	require.NoError(t, err)
	require.Equal(t, []float32{2, 0, 1, 1, 0, 2}, l)
	_, err = vae.InterpolateLatent(a, b, 1, vae.Lerp)
	require.Error(t, err)
	_, err = vae.InterpolateLatent(a, []float32{1}, 3, vae.Lerp)
	require.Error(t, err)
}

func TestLogMeanExp(t *testing.T) {
	require.InDelta(t, 1000+math.Log(2)-math.Log(3), vae.LogMeanExp([]float64{1000, 1000, math.Inf(-1)}), 1e-12)
	require.InDelta(t, -1000, vae.LogMeanExp([]float64{-1000, -1000}), 1e-12)
}

// Free bits: when every dimension's KL is below the floor, the objective
// charges exactly beta * Latent * floor for the KL term.
func TestFreeBitsFloor(t *testing.T) {
	d := ppcaData(64, 8, 2, 0.5, 8, 1)
	m, err := vae.New(vae.Config{Inputs: 8, Hidden: []int{8}, Latent: 3, Likelihood: vae.Gaussian, Precision: layers.Float64, Seed: 1})
	require.NoError(t, err)
	var first []train.Metric
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 1, BatchSize: 64, Objective: train.Variational{FreeBits: 50, Beta: 0.5},
		Callbacks: train.Callbacks{OnStep: func(p train.Progress) {
			if first == nil {
				first = append([]train.Metric(nil), p.Metrics...)
			}
		}}})
	loss, rec, kl := first[0].Value, first[1].Value, first[2].Value
	require.Less(t, kl, 3*50.0)
	require.InDelta(t, rec+0.5*3*50, loss, 1e-9)
}

func TestBernoulliNeedsUnitInterval(t *testing.T) {
	d := ppcaData(20, 8, 2, 0.5, 9, 1)
	m, err := vae.New(vae.Config{Inputs: 8, Latent: 2})
	require.NoError(t, err)
	tr, err := train.New(m, train.Settings{Epochs: 1})
	require.NoError(t, err)
	_, err = tr.Run(context.Background(), d, nil)
	require.ErrorContains(t, err, "Bernoulli likelihood needs values in [0, 1]")
	_, err = vae.New(vae.Config{Inputs: 8, Latent: 2, Scaling: "standard"})
	require.ErrorIs(t, err, vae.ErrConfig)
	_, err = train.New(m, train.Settings{Objective: train.Variational{Schedule: train.BetaSchedule{Kind: train.BetaLinear}}})
	require.ErrorIs(t, err, train.ErrConfig)
}

func TestKLAnnealingRaisesBeta(t *testing.T) {
	d := ppcaData(100, 8, 2, 0.5, 10, 1)
	m, err := vae.New(vae.Config{Inputs: 8, Latent: 2, Likelihood: vae.Gaussian, Seed: 1})
	require.NoError(t, err)
	var betas []float64
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 3, BatchSize: 25, Objective: train.Variational{Schedule: train.BetaSchedule{Kind: train.BetaLinear, Steps: 8}},
		Callbacks: train.Callbacks{OnStep: func(p train.Progress) {
			betas = append(betas, p.Metrics[3].Value)
		}}})
	require.Equal(t, []float64{0, 0.125, 0.25, 0.375, 0.5, 0.625, 0.75, 0.875, 1, 1, 1, 1}, betas)
}

// The Into variants give the same values as the allocating ones and
// allocate nothing once their buffers are warm.
func TestIntoVariants(t *testing.T) {
	m, x := smallModel(t)
	a, err := m.Sample(6, 3)
	require.NoError(t, err)
	b, err := m.SampleInto(nil, 6, 3)
	require.NoError(t, err)
	require.Equal(t, a, b)
	e1, _ := m.Encode(x[:40], 5)
	e2, err := m.EncodeInto(nil, x[:40], 5)
	require.NoError(t, err)
	require.Equal(t, e1, e2)
	d1, _ := m.Decode(e1, 5)
	d2, err := m.DecodeInto(nil, e1, 5)
	require.NoError(t, err)
	require.Equal(t, d1, d2)
	codes, dec, smp := make([]float32, 15), make([]float32, 40), make([]float32, 48)
	run := func() {
		_, _ = m.EncodeInto(codes, x[:40], 5)
		_, _ = m.DecodeInto(dec, codes, 5)
		_, _ = m.SampleInto(smp, 6, 9)
	}
	run()
	if !testenv.RaceBuild { // the race detector's instrumentation allocates
		require.Zero(t, testing.AllocsPerRun(50, run))
	}
}
