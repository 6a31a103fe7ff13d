//go:build openblas

package engine

// #cgo LDFLAGS: -lopenblas
import "C"

import (
	"github.com/quernlab/quern/internal/kernel/gemm"
	"github.com/quernlab/quern/internal/kernel/par"
	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/netlib/blas/netlib"
	G "gorgonia.org/gorgonia"
)

// With the openblas build tag every BLAS routine of the graphs, the float32
// matrix product included, comes from OpenBLAS through cgo (Debian:
// libopenblas-dev). It exists for comparison with the default pure-Go
// build.
func init() { G.Use(netlib.Implementation{}) }

// sgemm and dgemm are the matrix products of the fused operations.
var (
	sgemm = netlib.Implementation{}.Sgemm
	dgemm = netlib.Implementation{}.Dgemm
)

// sgemmThen is OpenBLAS's product, then C finished in blocks of rows,
// shared between goroutines where that is worth it.
func sgemmThen(tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int, then gemm.Finisher) {
	sgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
	if then == nil || m == 0 || n == 0 {
		return
	}
	if !par.Worth(m * n) {
		then.Finish(0, m, 0, n)
		return
	}
	const rows = 32
	par.Items((m+rows-1)/rows, func(i int) { then.Finish(i*rows, min((i+1)*rows, m), 0, n) })
}

// BLASName names the BLAS the graphs use.
func BLASName() string { return "openblas" }
