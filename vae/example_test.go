package vae_test

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
)

// meterReadings invents hourly profiles of electricity meters: two hidden
// habits (a morning and an evening peak) mixed per household.
func meterReadings(n int) *data.Dataset {
	rng := rand.New(rand.NewPCG(4, 4))
	x := make([]float32, 0, n*6)
	for i := 0; i < n; i++ {
		morning, evening := rng.Float64(), rng.Float64()
		for h := 0; h < 6; h++ {
			v := 0.2 + 0.5*morning*float64(h%3)/2 + 0.5*evening*float64(h/3) + 0.02*rng.NormFloat64()
			x = append(x, float32(v))
		}
	}
	d, _ := data.New(x, n, 6)
	return d
}

// fit trains m for the given epochs through package train.
func fit(m *vae.Model, d *data.Dataset, epochs int) error {
	t, err := train.New(m, train.Settings{Epochs: epochs})
	if err != nil {
		return err
	}
	_, err = t.Run(context.Background(), d, nil)
	return err
}

func Example_sampling() {
	d := meterReadings(1000)
	m, _ := vae.New(vae.Config{Inputs: 6, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Seed: 1})
	if err := fit(m, d, 10); err != nil {
		fmt.Println(err)
		return
	}
	a, _ := m.Sample(3, 7)
	b, _ := m.Sample(3, 7)
	fmt.Println(len(a)/6, "samples; same seed, same samples:", fmt.Sprint(a) == fmt.Sprint(b))
	// Output: 3 samples; same seed, same samples: true
}

func Example_interpolation() {
	a, _ := vae.InterpolateLatent([]float32{2, 0}, []float32{0, 2}, 3, vae.Slerp)
	fmt.Printf("%.3f\n", a)
	// Output: [2.000 0.000 1.414 1.414 0.000 2.000]
}

func Example_embeddings() {
	d := meterReadings(500)
	m, _ := vae.New(vae.Config{Inputs: 6, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Seed: 1})
	if err := fit(m, d, 5); err != nil {
		fmt.Println(err)
		return
	}
	ix, _ := m.NewIndex(d.X, d.Rows)
	nn, _ := ix.Nearest(d.Row(42), 2)
	fmt.Println("nearest to household 42:", nn[0].Row)
	// Output: nearest to household 42: 42
}
