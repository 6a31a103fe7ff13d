package gan_test

import (
	"fmt"

	"github.com/quernlab/quern/gan"
	"gonum.org/v1/gonum/mat"
)

func ExampleFrechetDistance() {
	a := gan.Gaussian{Mean: []float64{0, 0}, Cov: mat.NewSymDense(2, []float64{1, 0, 0, 4})}
	b := gan.Gaussian{Mean: []float64{1, 1}, Cov: mat.NewSymDense(2, []float64{9, 0, 0, 1})}
	d, _ := gan.FrechetDistance(a, b)
	fmt.Printf("%.3f\n", d) // 2 + (1+4+9+1) - 2(3+2)
	// Output: 7.000
}

func ExampleModel_Generate() {
	m, _ := gan.New(gan.Config{Outputs: 3, Seed: 1})
	a, _ := m.Generate(2, 42, -1)
	b, _ := m.Generate(2, 42, -1)
	fmt.Println(len(a), fmt.Sprint(a) == fmt.Sprint(b))
	// Output: 6 true
}
