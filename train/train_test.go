package train

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
)

// scripted is a Trainee whose losses follow a script, to test the loop's
// bookkeeping. Each step adds 1 to its single parameter.
type scripted struct {
	p        *layers.Param
	val      []float64 // validation loss per epoch
	epoch    int
	steps    int
	nanAt    [2]int // epoch, step
	stepInEp int
	rows     int
}

func (s *scripted) Params() []*layers.Param { return []*layers.Param{s.p} }

func (s *scripted) Step(ctx context.Context, b Batch) ([]Metric, error) {
	s.steps++
	s.stepInEp++
	s.rows += b.Rows
	s.p.F64()[0]++
	v := 1.0
	if s.nanAt[0] == s.epoch+1 && s.nanAt[1] == s.stepInEp {
		v = math.NaN()
	}
	return []Metric{{"loss", v}, {"aux", 2}}, nil
}

func (s *scripted) Evaluate(d *data.Dataset) ([]Metric, error) {
	v := s.val[s.epoch]
	s.epoch++
	s.stepInEp = 0
	return []Metric{{"loss", v}}, nil
}

func dataset(rows int) *data.Dataset {
	d, _ := data.New(make([]float32, rows*2), rows, 2)
	return d
}

func TestEarlyStoppingRestoresBest(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64), val: []float64{5, 4, 3, 3.5, 3.6, 3.7, 1}}
	d := dataset(10)
	var epochs []int
	h, err := Run(context.Background(), s, d, dataset(3), Config{Epochs: 7, BatchSize: 4, Patience: 2, OnEpoch: func(p Progress, _ *History) error {
		epochs = append(epochs, p.Epoch)
		require.True(t, p.EpochEnd)
		require.Equal(t, 3, p.Steps)
		return nil
	}}, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	require.Equal(t, []int{1, 2, 3, 4, 5}, epochs)
	require.True(t, h.StoppedEarly)
	require.Equal(t, 3, h.BestEpoch)
	require.Equal(t, 3.0, h.BestLoss)
	require.True(t, h.Restored)
	// 3 steps per epoch (10 rows, batches of 4): the best weights are the
	// ones after epoch 3, i.e. 9 steps.
	require.Equal(t, 9.0, s.p.F64()[0])
	require.Equal(t, 50, s.rows)
	tl, vl := h.Loss(4)
	require.Equal(t, 1.0, tl)
	require.Equal(t, 3.5, vl)
	require.Equal(t, "aux", h.Epochs[0].Train[1].Name)
	require.Equal(t, 2.0, h.Epochs[0].Train[1].Value)
}

func TestKeepLast(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64), val: []float64{5, 4, 4, 4}}
	_, err := Run(context.Background(), s, dataset(4), dataset(1), Config{Epochs: 4, BatchSize: 4, Patience: 2, KeepLast: true}, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	require.Equal(t, 4.0, s.p.F64()[0])
}

func TestNonFiniteLossNamesEpochAndStep(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64), val: []float64{1, 1, 1}, nanAt: [2]int{2, 3}}
	_, err := Run(context.Background(), s, dataset(10), dataset(2), Config{Epochs: 3, BatchSize: 4}, rand.New(rand.NewPCG(1, 1)))
	var nf *NonFiniteError
	require.True(t, errors.As(err, &nf), "%v", err)
	require.Equal(t, 2, nf.Epoch)
	require.Equal(t, 3, nf.Step)
	require.ErrorIs(t, err, ErrNonFinite)
	require.Contains(t, err.Error(), "epoch 2 step 3")
}

func TestCancellation(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64), val: make([]float64, 100)}
	ctx, cancel := context.WithCancel(context.Background())
	calls := 0
	_, err := Run(ctx, s, dataset(100), nil, Config{Epochs: 100, BatchSize: 10, OnStep: func(p Progress) {
		calls++
		require.Greater(t, p.SamplesPerSec, 0.0)
		if calls == 15 {
			cancel()
		}
	}}, rand.New(rand.NewPCG(1, 1)))
	require.ErrorIs(t, err, context.Canceled)
	require.Equal(t, 15, s.steps)
}

func TestConfigErrors(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64)}
	rng := rand.New(rand.NewPCG(1, 1))
	_, err := Run(context.Background(), s, dataset(4), nil, Config{Patience: 2}, rng)
	require.ErrorIs(t, err, ErrConfig)
	_, err = Run(context.Background(), s, dataset(4), nil, Config{Epochs: -1}, rng)
	require.ErrorIs(t, err, ErrConfig)
	_, err = Run(context.Background(), s, nil, nil, Config{}, rng)
	require.ErrorIs(t, err, ErrConfig)
}

// Resuming from a history continues at the next epoch and keeps the
// record.
func TestResumeFromHistory(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64), val: []float64{3, 2, 1, 0.5}}
	h, err := Run(context.Background(), s, dataset(4), dataset(1), Config{Epochs: 2, BatchSize: 4}, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	require.Len(t, h.Epochs, 2)
	h2, err := Run(context.Background(), s, dataset(4), dataset(1), Config{Epochs: 4, BatchSize: 4, Start: h}, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	require.Len(t, h2.Epochs, 4)
	require.Equal(t, 4, h2.BestEpoch)
	require.Len(t, h.Epochs, 2, "the starting history is not modified")
}
