package vec_test

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/internal/kernel/vec"
)

// The kernel handles the largest multiple of eight elements; the caller
// finishes the rest (here with the plain formula). At logit 0 every
// element's loss is log 2 and its gradient sigmoid(0) - y.
func ExampleBCE() {
	x := make([]float32, 10)
	y := []float32{0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5}
	d := make([]float32, len(x))
	sum, done := vec.BCE(d, x, y)
	for i := done; i < len(x); i++ {
		v := float64(x[i])
		sum += math.Max(v, 0) - v*float64(y[i]) + math.Log1p(math.Exp(-math.Abs(v)))
		d[i] = float32(1/(1+math.Exp(-v))) - y[i]
	}
	fmt.Printf("loss %.5f (10 log 2 = %.5f), gradient %v\n", sum, 10*math.Ln2, d[9])
	// Output: loss 6.93147 (10 log 2 = 6.93147), gradient 0
}
