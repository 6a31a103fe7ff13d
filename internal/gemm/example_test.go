package gemm_test

import (
	"fmt"

	"github.com/quernlab/quern/internal/gemm"
	"gonum.org/v1/gonum/blas"
)

// C = A B^T for a 2 x 3 A and a 2 x 3 B, row-major, as in gonum's blas32.
func ExampleSgemm() {
	a := []float32{1, 2, 3, 4, 5, 6}
	b := []float32{1, 0, 1, 0, 1, 0}
	c := make([]float32, 4)
	gemm.Sgemm(blas.NoTrans, blas.Trans, 2, 2, 3, 1, a, 3, b, 3, 0, c, 2)
	fmt.Println(c)
	// Output: [4 2 10 5]
}
