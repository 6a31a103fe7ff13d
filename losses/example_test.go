package losses_test

import (
	"fmt"

	"github.com/quernlab/quern/losses"
)

func ExampleKLStdNormal() {
	// Two rows of a 2-dimensional posterior; the first is the prior itself.
	mu := []float64{0, 0, 1, -1}
	logvar := []float64{0, 0, 0, 0}
	perDim := make([]float64, 2)
	kl, _ := losses.KLStdNormal(mu, logvar, 2, perDim)
	fmt.Printf("%.3f %.3f\n", kl, perDim)
	// Output: 0.500 [0.250 0.250]
}

func ExampleBCEWithLogits() {
	v, _ := losses.BCEWithLogits([]float64{100, -100}, []float64{0, 1})
	fmt.Println(v) // finite where exp(100) would overflow a naive form
	// Output: 100
}
