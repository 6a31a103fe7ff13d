package gemm_test

import (
	"fmt"

	"github.com/quernlab/quern/internal/kernel/gemm"
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

// biasReLU adds a bias row to finished blocks of c (ldc columns) and
// clamps them at zero.
type biasReLU struct {
	c, bias []float32
	ldc     int
}

func (f *biasReLU) Finish(i0, i1, j0, j1 int) {
	for i := i0; i < i1; i++ {
		for j := j0; j < j1; j++ {
			f.c[i*f.ldc+j] = max(0, f.c[i*f.ldc+j]+f.bias[j])
		}
	}
}

// A dense layer, relu(x W + b), with the bias and the activation applied
// to each block of the product as it is finished.
func ExampleSgemmThen() {
	x := []float32{1, 2, -1, 0} // 2 rows of 2
	w := []float32{1, -1, 3, 2} // 2 x 2
	c := make([]float32, 4)
	gemm.SgemmThen(blas.NoTrans, blas.NoTrans, 2, 2, 2, 1, x, 2, w, 2, 0, c, 2, &biasReLU{c: c, bias: []float32{0.5, -1}, ldc: 2})
	fmt.Println(c)
	// Output: [7.5 2 0 0]
}
