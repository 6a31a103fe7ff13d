package vae

import (
	"context"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/train"
)

// BenchmarkTrainStepVAE784 times one training step of the reference VAE,
// 784-400-(20 mean, 20 log-variance)-400-784, ReLU, BCE on logits plus the
// closed-form KL, Adam, batch 128, on random values in [0, 1].
func BenchmarkTrainStepVAE784(b *testing.B) {
	const batch = 128
	rng := rand.New(rand.NewPCG(2, 2))
	x := make([]float32, 784*batch)
	for i := range x {
		x[i] = rng.Float32()
	}
	d, _ := data.New(x, batch, 784)
	m, err := New(Config{Inputs: 784, Hidden: []int{400}, Latent: 20, Seed: 1})
	if err != nil {
		b.Fatal(err)
	}
	if _, err := m.Train(context.Background(), d, nil, train.Config{Epochs: 1, BatchSize: batch}); err != nil {
		b.Fatal(err)
	}
	tb := train.Batch{Rows: batch, Cols: 784, X: x}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := (trainee{m}).Step(context.Background(), tb); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(batch*b.N)/b.Elapsed().Seconds(), "samples/s")
	// 6 per weight (forward, weight gradient, input gradient) less the
	// input gradient of the encoder's first layer, fed with data: neither
	// side computes it
	var flops float64
	for _, l := range append(m.Encoder.Layers, m.Decoder.Layers...) {
		flops += 6 * float64(l.In*l.Out)
	}
	flops -= 2 * float64(m.Encoder.Layers[0].In*m.Encoder.Layers[0].Out)
	b.ReportMetric(flops*float64(batch*b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
}
