package engine_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/blas"
	gonumblas "gonum.org/v1/gonum/blas/gonum"
)

func TestBLASName(t *testing.T) {
	require.Contains(t, []string{"quern-gemm", "openblas"}, engine.BLASName())
	t.Logf("graphs use %s", engine.BLASName())
}

// The product the graphs use in this build (quern's own, or OpenBLAS's
// through cgo under -tags openblas) against gonum's pure-Go Sgemm, the
// reference, on random odd shapes, every transpose, and alpha and beta
// other than 1 and 0: within 1e-5 relative (float32 sums in different
// orders).
func TestGraphSgemmAgainstGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(6, 6))
	for i := 0; i < 40; i++ {
		m, n, k := 1+rng.IntN(70), 1+rng.IntN(70), 1+rng.IntN(300)
		tA, tB := blas.Transpose([]byte{'N', 'T'}[rng.IntN(2)]), blas.Transpose([]byte{'N', 'T'}[rng.IntN(2)])
		alpha, beta := float32([]float64{1, -0.5, 2}[rng.IntN(3)]), float32([]float64{0, 1, 0.25}[rng.IntN(3)])
		a, b, c := make([]float32, m*k), make([]float32, k*n), make([]float32, m*n)
		for _, s := range [][]float32{a, b, c} {
			for j := range s {
				s[j] = float32(rng.NormFloat64())
			}
		}
		lda, ldb := k, n
		if tA == blas.Trans {
			lda = m
		}
		if tB == blas.Trans {
			ldb = k
		}
		want := append([]float32(nil), c...)
		gonumblas.Implementation{}.Sgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, want, n)
		got := append([]float32(nil), c...)
		engine.GraphSgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, got, n)
		for j := range want {
			tol := 1e-5 * (math.Abs(float64(want[j])) + math.Sqrt(float64(k)))
			require.InDelta(t, want[j], got[j], tol, "%c%c m=%d n=%d k=%d alpha=%v beta=%v element %d", tA, tB, m, n, k, alpha, beta, j)
		}
	}
}
