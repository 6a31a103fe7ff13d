package fidelity_test

import (
	"fmt"

	"github.com/quernlab/quern/fidelity"
)

func ExampleKS() {
	real := []float64{1, 2, 3, 4}
	synthetic := []float64{3, 4, 5, 6}
	// the distribution functions differ most between 2 and 3: 2/4 - 0
	fmt.Println(fidelity.KS(real, synthetic))
	// Output: 0.5
}

func ExampleTV() {
	// levels 0, 1, 2: shares 1/2, 1/2, 0 against 1/4, 1/4, 1/2
	fmt.Println(fidelity.TV([]float64{0, 1, 0, 1}, []float64{0, 1, 2, 2}))
	// Output: 0.5
}
