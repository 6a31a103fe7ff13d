package model_test

import (
	"fmt"
	"os"
	"path/filepath"

	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/model"
)

// Open a model file and ask what the model in it can do, never its kind.
func ExampleOpen() {
	dir, _ := os.MkdirTemp("", "model")
	defer os.RemoveAll(dir)
	path := filepath.Join(dir, "g.qm")
	g, _ := gan.New(gan.Config{Outputs: 2, GenHidden: []int{4}, DiscHidden: []int{4}, Seed: 1})
	if err := g.Save(path, nil); err != nil {
		fmt.Println(err)
		return
	}

	m, err := model.Open(path)
	if err != nil {
		fmt.Println(err)
		return
	}
	if _, ok := m.(model.Scorer); !ok {
		fmt.Println("no anomaly scores from this model")
	}
	if s, ok := m.(model.Sampler); ok {
		rows, _ := s.Sample(3, 7)
		fmt.Println(len(rows)/m.Width(), "rows sampled")
	}
	// Output:
	// no anomaly scores from this model
	// 3 rows sampled
}
