package ae

import (
	"context"
	"math/rand/v2"
	"sort"
	"testing"
	"time"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
)

// benchModel is the serving reference shape, a 34-16-4-16-34 autoencoder,
// trained briefly on random rows (weights only need to be realistic).
func benchModel(b *testing.B) (*Model, []float32) {
	rng := rand.New(rand.NewPCG(1, 1))
	x := make([]float32, 34*4096)
	for i := range x {
		x[i] = float32(rng.NormFloat64())
	}
	d, _ := data.New(x, 4096, 34)
	m, err := New(Config{Inputs: 34, Hidden: []int{16}, Latent: 4, Seed: 1})
	if err != nil {
		b.Fatal(err)
	}
	if _, err := m.Train(context.Background(), d, nil, train.Config{Epochs: 1}); err != nil {
		b.Fatal(err)
	}
	m.Release()
	return m, x
}

// BenchmarkScoreOneRow times single-row scores (RowErrorsInto with a
// reused buffer) and reports the median and 99th percentile latency.
func BenchmarkScoreOneRow(b *testing.B) {
	m, x := benchModel(b)
	dst := make([]float64, 1)
	lat := make([]time.Duration, 0, b.N)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		r := i % 4096
		t0 := time.Now()
		if _, err := m.RowErrorsInto(dst, x[r*34:(r+1)*34], 1); err != nil {
			b.Fatal(err)
		}
		lat = append(lat, time.Since(t0))
	}
	b.StopTimer()
	sort.Slice(lat, func(i, j int) bool { return lat[i] < lat[j] })
	b.ReportMetric(float64(lat[len(lat)/2].Nanoseconds())/1e3, "p50-us")
	b.ReportMetric(float64(lat[len(lat)*99/100].Nanoseconds())/1e3, "p99-us")
}

// BenchmarkScoreBatch scores 4096 rows per call and reports rows/s.
func BenchmarkScoreBatch(b *testing.B) {
	m, x := benchModel(b)
	scoreBatch(b, m, x)
}

// scoreBatch times RowErrorsInto on the 4096 rows of x per call.
func scoreBatch(b *testing.B, m *Model, x []float32) {
	dst := make([]float64, 4096)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := m.RowErrorsInto(dst, x, 4096); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(4096*b.N)/b.Elapsed().Seconds(), "rows/s")
}

// trainStepBench times one training step (forward, backward, Adam) of an
// autoencoder on a fixed batch of random values in [0, 1].
func trainStepBench(b *testing.B, cfg Config, batch int) {
	rng := rand.New(rand.NewPCG(2, 2))
	x := make([]float32, cfg.Inputs*batch)
	for i := range x {
		x[i] = rng.Float32()
	}
	d, _ := data.New(x, batch, cfg.Inputs)
	m, err := New(cfg)
	if err != nil {
		b.Fatal(err)
	}
	if _, err := m.Train(context.Background(), d, nil, train.Config{Epochs: 1, BatchSize: batch}); err != nil {
		b.Fatal(err)
	}
	tb := train.Batch{Rows: batch, Cols: cfg.Inputs, X: x}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := (trainee{m}).Step(context.Background(), tb); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(batch*b.N)/b.Elapsed().Seconds(), "samples/s")
	// 6 per weight (forward, weight gradient, input gradient) less the
	// input gradient of the first layer, fed with data: neither side
	// computes it
	var flops float64
	for _, net := range []*layers.MLP{m.Encoder, m.Decoder} {
		for _, l := range net.Layers {
			flops += 6 * float64(l.In*l.Out)
		}
	}
	flops -= 2 * float64(m.Encoder.Layers[0].In*m.Encoder.Layers[0].Out)
	b.ReportMetric(flops*float64(batch*b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
}

// The reference shapes: 784-128-32-128-784 with MSE at batch 256, and the
// 16-8-2-8-16 autoencoder at batch 32 (fixed cost per step).
func BenchmarkTrainStepAE784(b *testing.B) {
	trainStepBench(b, Config{Inputs: 784, Hidden: []int{128}, Latent: 32, Scaling: data.ScaleNone, Seed: 1}, 256)
}

func BenchmarkTrainStepTiny(b *testing.B) {
	trainStepBench(b, Config{Inputs: 16, Hidden: []int{8}, Latent: 2, Scaling: data.ScaleNone, Seed: 1}, 32)
}

// BenchmarkScoreBatch784 scores 4096 rows of the reference training shape
// (784-128-32-128-784, untrained weights) per call and reports rows/s.
func BenchmarkScoreBatch784(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	x := make([]float32, 784*4096)
	for i := range x {
		x[i] = rng.Float32()
	}
	m, err := New(Config{Inputs: 784, Hidden: []int{128}, Latent: 32, Seed: 1, Scaling: data.ScaleNone})
	if err != nil {
		b.Fatal(err)
	}
	scoreBatch(b, m, x)
}
