package train

import (
	"math/rand/v2"
	"runtime"
	"testing"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

// stepRig prepares a trainer for m on one batch of random values in
// [0, 1] and returns a function that runs one training step on it, as the
// loop does (moves, then metrics).
func stepRig(t testing.TB, m Model, width, rows int) func() error {
	rng := rand.New(rand.NewPCG(2, 2))
	x := make([]float32, width*rows)
	for i := range x {
		x[i] = rng.Float32()
	}
	d, err := data.New(x, rows, width)
	require.NoError(t, err)
	tr, err := New(m, Settings{Epochs: 1, BatchSize: rows})
	require.NoError(t, err)
	sd, _, err := tr.r.prepare(d, nil)
	require.NoError(t, err)
	sd = scaledCopy(tr.r, sd)
	l := &loop{r: tr.r, s: tr.s}
	moves := tr.r.moves()
	b := &batch{Rows: rows, Cols: width, X: sd.X}
	return func() error {
		if err := l.step(moves, b, 0); err != nil {
			return err
		}
		tr.r.metrics()
		return nil
	}
}

func mustNew[M any](m M, err error) M {
	if err != nil {
		panic(err)
	}
	return m
}

// A training step (forward, backward, Adam; for a GAN a discriminator and
// a generator update) allocates nothing once the programs exist, at one
// thread (more threads start goroutines). Skipped in race builds, whose
// instrumentation allocates.
func TestTrainStepAllocatesNothing(t *testing.T) {
	if testenv.RaceBuild {
		t.Skip("the race detector's instrumentation allocates")
	}
	old := runtime.GOMAXPROCS(1)
	defer runtime.GOMAXPROCS(old)
	for _, c := range []struct {
		name  string
		m     Model
		width int
	}{
		{"ae16", mustNew(ae.New(ae.Config{Inputs: 16, Hidden: []int{8}, Latent: 2, Scaling: data.ScaleNone, Seed: 1})), 16},
		{"ae40", mustNew(ae.New(ae.Config{Inputs: 40, Hidden: []int{24}, Latent: 6, Scaling: data.ScaleNone, Seed: 1})), 40},
		{"vae", mustNew(vae.New(vae.Config{Inputs: 40, Hidden: []int{24}, Latent: 4, Scaling: data.ScaleNone, Seed: 1})), 40},
		{"gan", mustNew(gan.New(gan.Config{Outputs: 30, Noise: 8, GenHidden: []int{16}, DiscHidden: []int{16}, Activation: layers.LeakyReLU,
			LeakySlope: 0.2, GenOutput: layers.Tanh, Scaling: data.ScaleNone, Seed: 1})), 30},
		// spectral normalisation (a power iteration per discriminator
		// update) and several discriminator steps per generator step
		{"wgan", mustNew(gan.New(gan.Config{Outputs: 30, Noise: 8, GenHidden: []int{16}, DiscHidden: []int{16}, Critic: gan.Wasserstein,
			Scaling: data.ScaleNone, Seed: 1})), 30},
		// convolutions and their transposes (9x8 images of 2 channels)
		{"conv-ae", mustNew(ae.New(ae.Config{Inputs: 144, Image: []int{9, 8, 2}, Channels: []int{4, 6}, Hidden: []int{}, Latent: 3, Scaling: data.ScaleNone, Seed: 1})), 144},
		{"conv-vae", mustNew(vae.New(vae.Config{Inputs: 144, Image: []int{9, 8, 2}, Channels: []int{4, 6}, Hidden: []int{}, Latent: 3, Seed: 1})), 144},
		{"conv-wgan", mustNew(gan.New(gan.Config{Outputs: 144, Image: []int{9, 8, 2}, Channels: []int{4, 6}, Noise: 8, GenHidden: []int{}, DiscHidden: []int{},
			Critic: gan.Wasserstein, Scaling: data.ScaleNone, Seed: 1})), 144},
	} {
		t.Run(c.name, func(t *testing.T) {
			step := stepRig(t, c.m, c.width, 32)
			require.NoError(t, step())
			var stepErr error
			allocs := testing.AllocsPerRun(20, func() {
				if err := step(); err != nil {
					stepErr = err
				}
			})
			require.NoError(t, stepErr)
			require.Zero(t, allocs, "allocations per step")
		})
	}
}

// benchStep times training steps and reports samples/s and GFLOP/s for
// flops floating-point operations per sample.
func benchStep(b *testing.B, m Model, width, rows int, flops float64) {
	step := stepRig(b, m, width, rows)
	if err := step(); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := step(); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(rows*b.N)/b.Elapsed().Seconds(), "samples/s")
	b.ReportMetric(flops*float64(rows*b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
}

// weights is the sum of in*out over the layers of nets.
func weights(nets ...*layers.MLP) float64 {
	var w float64
	for _, n := range nets {
		for _, l := range n.Layers {
			w += float64(l.In * l.Out)
		}
	}
	return w
}

// aeStep benchmarks an autoencoder's step. Flops per sample: 6 per weight
// (forward, weight gradient, input gradient) less the input gradient of
// the first layer, fed with data: neither side of bench/train.sh computes
// it.
func aeStep(b *testing.B, cfg ae.Config, rows int) {
	m := mustNew(ae.New(cfg))
	first := m.Encoder.Layers[0]
	benchStep(b, m, cfg.Inputs, rows, 6*weights(m.Encoder, m.Decoder)-2*float64(first.In*first.Out))
}

// The reference shapes: 784-128-32-128-784 with MSE at batch 256, and the
// 16-8-2-8-16 autoencoder at batch 32 (fixed cost per step).
func BenchmarkTrainStepAE784(b *testing.B) {
	aeStep(b, ae.Config{Inputs: 784, Hidden: []int{128}, Latent: 32, Scaling: data.ScaleNone, Seed: 1}, 256)
}

func BenchmarkTrainStepTiny(b *testing.B) {
	aeStep(b, ae.Config{Inputs: 16, Hidden: []int{8}, Latent: 2, Scaling: data.ScaleNone, Seed: 1}, 32)
}

// BenchmarkTrainStepVAE784 times one training step of the reference VAE,
// 784-400-(20 mean, 20 log-variance)-400-784, ReLU, BCE on logits plus the
// closed-form KL, Adam, batch 128 (flops as for aeStep).
func BenchmarkTrainStepVAE784(b *testing.B) {
	m := mustNew(vae.New(vae.Config{Inputs: 784, Hidden: []int{400}, Latent: 20, Seed: 1}))
	first := m.Encoder.Layers[0]
	benchStep(b, m, 784, 128, 6*weights(m.Encoder, m.Decoder)-2*float64(first.In*first.Out))
}

// BenchmarkTrainStepGAN784 times one discriminator and one generator update
// of the reference GAN: generator 64-256-512-784 (leaky ReLU 0.2, tanh
// out), discriminator 784-512-256-1, non-saturating loss, Adam 2e-4 with
// betas 0.5/0.999, batch 64. Flops per sample: discriminator step 2G +
// 12D, generator step 6G + 4D (G and D: the networks' weights).
func BenchmarkTrainStepGAN784(b *testing.B) {
	m := mustNew(gan.New(gan.Config{Outputs: 784, Noise: 64, GenHidden: []int{256, 512}, DiscHidden: []int{512, 256}, Activation: layers.LeakyReLU,
		LeakySlope: 0.2, GenOutput: layers.Tanh, Scaling: data.ScaleNone, Seed: 1}))
	benchStep(b, m, 784, 64, 8*weights(m.Generator)+16*weights(m.Discriminator))
}

// convFlops is 2 multiply-adds' flops per weight use of m's convolutions
// for one sample: forward, weight gradient and input gradient (6 per
// use), less the input gradient of a first convolution fed with data.
func convFlops(nets ...*layers.MLP) float64 {
	var f float64
	for _, n := range nets {
		for i, c := range append(append([]*layers.Conv(nil), n.Front...), n.Back...) {
			oh, ow := c.Shape.Out()
			uses := float64(oh * ow * c.Shape.OutC * c.Shape.K())
			f += 6 * uses
			if i == 0 && len(n.Front) > 0 {
				f -= 2 * uses
			}
		}
	}
	return f
}

// BenchmarkTrainStepConvVAE times one training step of the reference
// convolutional VAE: 28x28 grey images, two stride-2 3x3 convolutions of
// 32 and 64 channels (ReLU), a dense layer to the 16 means and 16
// log-variances, a dense layer back to 7x7x64 and the two transposed
// convolutions, BCE on logits plus the closed-form KL, Adam, batch 128
// (bench/peer_train.py's convvae).
func BenchmarkTrainStepConvVAE(b *testing.B) {
	m := mustNew(vae.New(vae.Config{Inputs: 784, Image: []int{28, 28, 1}, Channels: []int{32, 64}, Hidden: []int{}, Latent: 16, Seed: 1}))
	benchStep(b, m, 784, 128, convFlops(m.Encoder, m.Decoder)+6*weights(m.Encoder, m.Decoder))
}
