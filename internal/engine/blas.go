//go:build !openblas

package engine

import (
	"github.com/quernlab/quern/internal/kernel/gemm"
	"gonum.org/v1/gonum/blas"
	gonumblas "gonum.org/v1/gonum/blas/gonum"
	G "gorgonia.org/gorgonia"
)

// blasImpl is gonum's pure-Go BLAS with quern's float32 matrix product in
// place of gonum's Sgemm.
type blasImpl struct{ gonumblas.Implementation }

// Sgemm is gemm.Sgemm.
func (blasImpl) Sgemm(tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	gemm.Sgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

func init() { G.Use(blasImpl{}) }

// sgemm and dgemm are the matrix products of the fused operations;
// sgemmThen also hands the finished blocks of the product to a
// gemm.Finisher.
var (
	sgemm     = gemm.Sgemm
	sgemmThen = gemm.SgemmThen
	dgemm     = gonumblas.Implementation{}.Dgemm
)

// BLASName names the BLAS the graphs use: "quern-gemm" here, "openblas"
// in builds with the openblas tag.
func BLASName() string { return "quern-gemm" }
