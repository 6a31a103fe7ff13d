package layers_test

import (
	"fmt"
	"math/rand/v2"

	"github.com/quernlab/quern/layers"
)

func ExampleNewMLP() {
	rng := rand.New(rand.NewPCG(1, 1))
	m, err := layers.NewMLP(layers.MLPConfig{Name: "encoder", Widths: []int{4, 3, 2}, Hidden: layers.Tanh}, rng)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, p := range m.Params() {
		r, c := p.Shape()
		fmt.Printf("%s %dx%d\n", p.Name(), r, c)
	}
	var ws layers.Workspace
	out, _ := m.Forward32([]float32{0, 0, 0, 0}, 1, &ws)
	fmt.Println(out) // zero biases: a zero input maps to zero
	// Output:
	// encoder.0.weight 4x3
	// encoder.0.bias 1x3
	// encoder.1.weight 3x2
	// encoder.1.bias 1x2
	// [0 0]
}
