package train_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/train"
)

// readings invents n rows of three sensors that move together.
func readings(n int, seed uint64) *data.Dataset {
	rng := rand.New(rand.NewPCG(seed, 1))
	x := make([]float32, 0, 3*n)
	for i := 0; i < n; i++ {
		load := rng.Float64()
		x = append(x, float32(10*load+0.1*rng.NormFloat64()), float32(2*load+0.05*rng.NormFloat64()), float32(5-3*load+0.1*rng.NormFloat64()))
	}
	d, _ := data.New(x, n, 3)
	return d
}

func ExampleNew() {
	m, _ := ae.New(ae.Config{Inputs: 3, Hidden: []int{8}, Latent: 1, Seed: 1})
	t, err := train.New(m, train.Settings{Epochs: 40, BatchSize: 32, Patience: 5,
		Objective: train.Reconstruction{Noise: train.Corruption{Kind: train.GaussianNoise, Level: 0.05}}})
	if err != nil {
		fmt.Println(err)
		return
	}
	h, err := t.Run(context.Background(), readings(800, 1), readings(200, 2))
	if err != nil {
		fmt.Println(err)
		return
	}
	first, _ := h.Loss(1)
	_, best := h.Loss(h.BestEpoch)
	fmt.Printf("validation loss fell from the first epoch's training loss: %v\n", best < first)
	fmt.Println("metrics:", h.Epochs[0].Train[0].Name, h.Epochs[0].Train[1].Name)
	// Output:
	// validation loss fell from the first epoch's training loss: true
	// metrics: loss reconstruction
}

func ExampleResume() {
	m, _ := ae.New(ae.Config{Inputs: 3, Hidden: []int{8}, Latent: 1, Seed: 1})
	t, _ := train.New(m, train.Settings{Epochs: 2, BatchSize: 32})
	rows := readings(400, 3)
	t.Run(context.Background(), rows, nil)
	ckpt, err := t.Checkpoint(nil) // modelfile.Write(path, ckpt) keeps it
	if err != nil {
		fmt.Println(err)
		return
	}
	// later, perhaps in another process: take the run to 5 epochs
	r, err := train.Resume(ckpt, &train.Settings{Epochs: 5})
	if err != nil {
		fmt.Println(err)
		return
	}
	h, _ := r.Run(context.Background(), rows, nil)
	fmt.Println("epochs:", len(h.Epochs), "batch size kept:", r.Settings().BatchSize)
	// Output: epochs: 5 batch size kept: 32
}

// Training on a file read again on every epoch, never held: the same
// model for a seed whatever the thread count.
func ExampleTrainer_RunStream() {
	dir, _ := os.MkdirTemp("", "runstream")
	defer os.RemoveAll(dir)
	d := readings(3000, 3)
	var b strings.Builder
	b.WriteString("speed,current,temperature\n")
	for i := range d.Rows {
		r := d.Row(i)
		fmt.Fprintf(&b, "%g,%g,%g\n", r[0], r[1], r[2])
	}
	path := filepath.Join(dir, "readings.csv")
	os.WriteFile(path, []byte(b.String()), 0o644)

	s, err := data.OpenStream(path, data.StreamConfig{Validation: 0.2, SplitSeed: 1})
	if err != nil {
		fmt.Println(err)
		return
	}
	m, _ := ae.New(ae.Config{Inputs: s.Cols, Hidden: []int{8}, Latent: 1, Seed: 1})
	t, _ := train.New(m, train.Settings{Epochs: 20, BatchSize: 32})
	h, err := t.RunStream(context.Background(), s, train.StreamSettings{Buffer: 500})
	if err != nil {
		fmt.Println(err)
		return
	}
	first, _ := h.Loss(1)
	_, last := h.Loss(len(h.Epochs))
	fmt.Println("columns", m.Columns, "; validation loss below the first epoch's training loss:", last < first)
	// Output:
	// columns [speed current temperature] ; validation loss below the first epoch's training loss: true
}
