package train_test

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
)

// mean is a one-parameter model that learns the mean of its rows by
// gradient steps on the squared error, written without a graph to show the
// Trainee interface.
type mean struct {
	w       *layers.Param
	metrics []train.Metric
}

func (m *mean) Params() []*layers.Param { return []*layers.Param{m.w} }

func (m *mean) loss(x []float32) (loss, grad float64) {
	w := m.w.F64()[0]
	for _, v := range x {
		d := w - float64(v)
		loss += d * d
		grad += 2 * d
	}
	n := float64(len(x))
	return loss / n, grad / n
}

func (m *mean) Step(_ context.Context, b train.Batch) ([]train.Metric, error) {
	l, g := m.loss(b.X)
	m.w.F64()[0] -= 0.1 * g
	m.metrics = append(m.metrics[:0], train.Metric{Name: "loss", Value: l})
	return m.metrics, nil
}

func (m *mean) Evaluate(d *data.Dataset) ([]train.Metric, error) {
	l, _ := m.loss(d.X)
	return []train.Metric{{Name: "loss", Value: l}}, nil
}

func ExampleRun() {
	x := make([]float32, 200)
	for i := range x {
		x[i] = float32(3 + i%5) // mean 5
	}
	d, _ := data.New(x, 200, 1)
	m := &mean{w: layers.NewParam("w", 1, 1, layers.Float64)}
	h, err := train.Run(context.Background(), m, d, d, train.Config{Epochs: 5, BatchSize: 20}, rand.New(rand.NewPCG(1, 1)))
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("learned %.2f in %d epochs; best epoch %d\n", m.w.F64()[0], len(h.Epochs), h.BestEpoch)
	// Output: learned 5.05 in 5 epochs; best epoch 3
}
