package gemm

import (
	"fmt"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/blas"
)

// BenchmarkSgemmShapes times the products of one training step of the
// reference autoencoder (784-128-32-128-784, batch 256) and VAE
// (784-400-40/20-400-784, batch 128): forward x W, weight gradient x^T dy,
// input gradient dy W^T.
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
	} {
		b.Run(fmt.Sprintf("%s", s.name), func(b *testing.B) {
			rng := rand.New(rand.NewPCG(1, 1))
			a, bb, c := randSlice(rng, s.m*s.k), randSlice(rng, s.k*s.n), make([]float32, s.m*s.n)
			lda, ldb := s.k, s.n
			if s.tA == blas.Trans {
				lda = s.m
			}
			if s.tB == blas.Trans {
				ldb = s.k
			}
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				Sgemm(s.tA, s.tB, s.m, s.n, s.k, 1, a, lda, bb, ldb, 0, c, s.n)
			}
			b.ReportMetric(2*float64(s.m*s.n*s.k)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}
