package optim_test

import (
	"fmt"

	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/optim"
)

func ExampleNewAdam() {
	// Minimise (w-3)^2 from w = 0.
	w := layers.NewParam("w", 1, 1, layers.Float64)
	opt, _ := optim.NewAdam(optim.AdamConfig{Rate: 0.1})
	for i := 0; i < 300; i++ {
		w.Grad64()[0] = 2 * (w.F64()[0] - 3)
		_ = opt.Update([]*layers.Param{w})
	}
	fmt.Printf("w = %.3f after %d steps\n", w.F64()[0], opt.Steps())
	// Output: w = 3.000 after 300 steps
}
