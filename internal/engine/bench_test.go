package engine_test

import (
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/kernel/gemm"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/optim"
	"gonum.org/v1/gonum/blas"
	gonumblas "gonum.org/v1/gonum/blas/gonum"
)

// One training step (forward, backward, Adam update) of the reference
// shapes; go test -bench . -benchmem ./internal/engine reports ns/op and
// allocs/op, which are per step here.

func BenchmarkStepVAE784(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	enc, _ := layers.NewMLP(layers.MLPConfig{Name: "enc", Widths: []int{784, 400, 40}}, rng)
	dec, _ := layers.NewMLP(layers.MLPConfig{Name: "dec", Widths: []int{20, 400, 784}}, rng)
	const batch = 128
	ph := engine.NewPhase(layers.Float32, true, func(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
		x := g.Input(handle("x"), n, 784)
		eps := g.Input(handle("eps"), n, 20)
		h := g.MLP(enc, x, dropouts(enc))
		mu, lv := g.Slice(h, 0, 20), g.Slice(h, 20, 40)
		z := g.Add(mu, g.Mul(g.Exp(g.Scale(lv, 0.5)), eps))
		logits := g.MLP(dec, z, dropouts(dec))
		rec := g.Scale(losses.GraphBCEWithLogits(g, logits, x), 784)
		return g.Add(rec, losses.GraphKLStdNormal(g, mu, lv)), nil
	})
	defer ph.Close()
	benchStep(b, ph, batch, append(enc.Params(), dec.Params()...), rng)
}

func BenchmarkStepTinyAE(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	m, _ := layers.NewMLP(layers.MLPConfig{Widths: []int{16, 8, 2, 8, 16}}, rng)
	ph := engine.NewPhase(layers.Float32, true, denseLoss(m, 0))
	defer ph.Close()
	benchStep(b, ph, 32, m.Params(), rng)
}

func benchStep(b *testing.B, ph *engine.Phase, batch int, params []*layers.Param, rng *rand.Rand) {
	opt, _ := optim.NewAdam(optim.AdamConfig{Rate: 1e-3})
	p, err := ph.Program(batch)
	if err != nil {
		b.Fatal(err)
	}
	for _, name := range []string{"x", "eps"} {
		v := p.F32(handle(name))
		for i := range v {
			v[i] = rng.Float32()
		}
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := p.Run(engine.RunOptions{}); err != nil {
			b.Fatal(err)
		}
		if err := opt.Update(params); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(batch*b.N)/b.Elapsed().Seconds(), "samples/s")
}

// BenchmarkSgemm1024 measures the float32 matrix product that the
// engine's graphs use (package gemm, plugged into gorgonia's BLAS hook),
// 1024x1024 by 1024x1024, as the peak against which training steps are
// compared; BenchmarkSgemm1024Gonum is gonum's pure-Go Sgemm for scale.
func BenchmarkSgemm1024(b *testing.B) { sgemmBench(b, gemm.Sgemm) }

func BenchmarkSgemm1024Gonum(b *testing.B) { sgemmBench(b, gonumblas.Implementation{}.Sgemm) }

func sgemmBench(b *testing.B, f func(tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int)) {
	const n = 1024
	rng := rand.New(rand.NewPCG(1, 1))
	a, c, out := make([]float32, n*n), make([]float32, n*n), make([]float32, n*n)
	for i := range a {
		a[i], c[i] = rng.Float32(), rng.Float32()
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		f(blas.NoTrans, blas.NoTrans, n, n, n, 1, a, n, c, n, 0, out, n)
	}
	b.ReportMetric(2*n*n*n*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
}

// BenchmarkSgemm1024Graph times the product the graphs use in this build
// (quern's own, or OpenBLAS's under -tags openblas).
func BenchmarkSgemm1024Graph(b *testing.B) { sgemmBench(b, engine.GraphSgemm) }

// BenchmarkSgemmShapes times the products of one training step of the
// reference autoencoder (784-128-32-128-784, batch 256), VAE and GAN with
// the product the graphs use in this build (quern's own, or OpenBLAS's
// under -tags openblas): forward x W, weight gradient x^T dy, input
// gradient dy W^T.
func BenchmarkSgemmShapes(b *testing.B) {
	for _, s := range []struct {
		name    string
		tA, tB  blas.Transpose
		m, n, k int
	}{
		{"ae_fwd_256x784x128", blas.NoTrans, blas.NoTrans, 256, 128, 784},
		{"ae_dW_784x256x128", blas.Trans, blas.NoTrans, 784, 128, 256},
		{"ae_dX_256x128x784", blas.NoTrans, blas.Trans, 256, 784, 128},
		{"vae_fwd_128x784x400", blas.NoTrans, blas.NoTrans, 128, 400, 784},
		{"vae_dW_784x128x400", blas.Trans, blas.NoTrans, 784, 400, 128},
		{"vae_dX_128x400x784", blas.NoTrans, blas.Trans, 128, 784, 400},
		{"gan_fwd_64x784x512", blas.NoTrans, blas.NoTrans, 64, 512, 784},
		{"gan_dW_784x64x512", blas.Trans, blas.NoTrans, 784, 512, 64},
	} {
		b.Run(s.name, func(b *testing.B) {
			rng := rand.New(rand.NewPCG(1, 1))
			x, y, out := make([]float32, s.m*s.k), make([]float32, s.k*s.n), make([]float32, s.m*s.n)
			for i := range x {
				x[i] = rng.Float32()
			}
			for i := range y {
				y[i] = rng.Float32()
			}
			lda, ldb := s.k, s.n
			if s.tA == blas.Trans {
				lda = s.m
			}
			if s.tB == blas.Trans {
				ldb = s.k
			}
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				engine.GraphSgemm(s.tA, s.tB, s.m, s.n, s.k, 1, x, lda, y, ldb, 0, out, s.n)
			}
			b.ReportMetric(2*float64(s.m*s.n*s.k)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}
