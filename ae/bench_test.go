package ae

import (
	"math/rand/v2"
	"sort"
	"testing"
	"time"

	"github.com/quernlab/quern/data"
)

// benchModel is the serving reference shape, a 34-16-4-16-34 autoencoder
// with its initial weights and a scaler fitted on random rows (the time a
// score takes does not depend on the values of the weights).
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
	if m.Scaler, err = data.Fit(data.ScaleStandard, d); err != nil {
		b.Fatal(err)
	}
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
