package ae_test

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/train"
)

// pumpReadings invents n healthy readings of a pump: flow, pressure and
// motor current move together; temperature drifts a little.
func pumpReadings(rng *rand.Rand, n int) *data.Dataset {
	x := make([]float32, 0, 4*n)
	for i := 0; i < n; i++ {
		load := rng.Float64()
		x = append(x,
			float32(20+10*load+0.3*rng.NormFloat64()), // flow
			float32(3+2*load+0.05*rng.NormFloat64()),  // pressure
			float32(8+4*load+0.1*rng.NormFloat64()),   // current
			float32(60+5*load+0.5*rng.NormFloat64()),  // temperature
		)
	}
	d, _ := data.New(x, n, 4)
	d.Columns = []string{"flow", "pressure", "current", "temperature"}
	return d
}

func Example() {
	rng := rand.New(rand.NewPCG(1, 2))
	normal, holdout := pumpReadings(rng, 2000), pumpReadings(rng, 500)

	m, err := ae.New(ae.Config{Inputs: 4, Hidden: []int{8}, Latent: 1, Seed: 7})
	if err != nil {
		fmt.Println(err)
		return
	}
	t, err := train.New(m, train.Settings{Epochs: 20, BatchSize: 64})
	if err != nil {
		fmt.Println(err)
		return
	}
	if _, err := t.Run(context.Background(), normal, nil); err != nil {
		fmt.Println(err)
		return
	}
	th, _ := m.Calibrate(holdout.X, holdout.Rows, anomaly.Config{FalseAlarm: 0.01})
	fmt.Printf("expected false alarms: %.1f%%\n", 100*th.ExpectedFalseAlarm)

	// A pump drawing far too much current for its flow.
	scores, _ := m.Score([]float32{25, 4, 17, 62}, 1, 1)
	fmt.Println("anomaly:", scores[0].Anomaly, "driven by", scores[0].Top[0].Name)
	fmt.Println(ae.Caution)
	// Output:
	// expected false alarms: 1.0%
	// anomaly: true driven by current
	// Caution: anomaly scores are a decision aid, calibrated only for data like the training data; review flagged records before acting on them.
}
