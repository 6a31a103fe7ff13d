package gan

import (
	"context"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
)

// BenchmarkTrainStepGAN784 times one discriminator and one generator update
// of the reference GAN: generator 64-256-512-784 (leaky ReLU 0.2, tanh
// out), discriminator 784-512-256-1, non-saturating loss, Adam 2e-4 with
// betas 0.5/0.999, batch 64.
func BenchmarkTrainStepGAN784(b *testing.B) {
	const batch = 64
	rng := rand.New(rand.NewPCG(2, 2))
	x := make([]float32, 784*batch)
	for i := range x {
		x[i] = rng.Float32()
	}
	d, _ := data.New(x, batch, 784)
	m, err := New(Config{Outputs: 784, Noise: 64, GenHidden: []int{256, 512}, DiscHidden: []int{512, 256}, Activation: layers.LeakyReLU,
		LeakySlope: 0.2, GenOutput: layers.Tanh, Scaling: data.ScaleNone, Seed: 1})
	if err != nil {
		b.Fatal(err)
	}
	if err := m.prepare(d, nil); err != nil {
		b.Fatal(err)
	}
	tb := train.Batch{Rows: batch, Cols: 784, X: x}
	if _, err := (trainee{m}).Step(context.Background(), tb); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := (trainee{m}).Step(context.Background(), tb); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(batch*b.N)/b.Elapsed().Seconds(), "samples/s")
	// per sample: discriminator step 2G + 12D, generator step 6G + 4D
	// (G and D: sums of in*out over each network's layers)
	var g, dd float64
	for _, l := range m.Generator.Layers {
		g += float64(l.In * l.Out)
	}
	for _, l := range m.Discriminator.Layers {
		dd += float64(l.In * l.Out)
	}
	b.ReportMetric((8*g+16*dd)*float64(batch*b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
}
