package train

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/optim"
	"github.com/stretchr/testify/require"
)

// scripted is a recipe whose losses follow a script, to test the loop's
// bookkeeping without graphs: each step adds 1 to its single parameter
// and reports the loss 1 (NaN at nanAt) and "aux" 2; each evaluation
// reports the next scripted validation loss.
type scripted struct {
	p        *layers.Param
	val      []float64 // validation loss per epoch
	epoch    int
	steps    int
	nanAt    [2]int // epoch, step
	stepInEp int
	rows     int
	last     int
}

func (s *scripted) params() []*layers.Param { return []*layers.Param{s.p} }
func (s *scripted) prepare(tr, va *data.Dataset) (*data.Dataset, *data.Dataset, error) {
	return tr, va, nil
}
func (s *scripted) moves() []*move                         { return nil }
func (s *scripted) usable(rows int) int                    { s.last = rows; return rows }
func (s *scripted) optimizers() map[string]optim.Optimizer { return nil }
func (s *scripted) state() any                             { return nil }
func (s *scripted) restore([]byte) error                   { return nil }
func (s *scripted) release()                               {}

func (s *scripted) metrics() []Metric {
	s.steps++
	s.stepInEp++
	s.rows += s.last
	s.p.F64()[0]++
	v := 1.0
	if s.nanAt[0] == s.epoch+1 && s.nanAt[1] == s.stepInEp {
		v = math.NaN()
	}
	return []Metric{{"loss", v}, {"aux", 2}}
}

func (s *scripted) evaluation() *evaluation {
	return &evaluation{Names: []string{"loss"}, Phase: nil}
}

// evaluate is the scripted validation (the loop's own needs graphs).
func (s *scripted) evaluate() []Metric {
	v := s.val[s.epoch]
	s.epoch++
	s.stepInEp = 0
	return []Metric{{"loss", v}}
}

func dataset(rows int) *data.Dataset {
	d, _ := data.New(make([]float32, rows*2), rows, 2)
	return d
}

// runScripted runs the loop on a scripted recipe.
func runScripted(ctx context.Context, s *scripted, tr, va *data.Dataset, set Settings, h *History) (*History, error) {
	if h == nil {
		h = &History{}
	} else {
		h = h.clone()
	}
	set, err := set.resolve("ae")
	if err != nil {
		return h, err
	}
	l := &loop{r: s, s: set, shuffle: rand.New(rand.NewPCG(1, 1)), h: h, evalHook: s.evaluate}
	return h, l.run(ctx, tr, va)
}

func TestEarlyStoppingRestoresBest(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64), val: []float64{5, 4, 3, 3.5, 3.6, 3.7, 1}}
	d := dataset(10)
	var epochs []int
	h, err := runScripted(context.Background(), s, d, dataset(3), Settings{Epochs: 7, BatchSize: 4, Patience: 2, Callbacks: Callbacks{OnEpoch: func(p Progress, _ *History) error {
		epochs = append(epochs, p.Epoch)
		require.True(t, p.EpochEnd)
		require.Equal(t, 3, p.Steps)
		return nil
	}}}, nil)
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
	_, err := runScripted(context.Background(), s, dataset(4), dataset(1), Settings{Epochs: 4, BatchSize: 4, Patience: 2, KeepLast: true}, nil)
	require.NoError(t, err)
	require.Equal(t, 4.0, s.p.F64()[0])
}

func TestNonFiniteLossNamesEpochAndStep(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64), val: []float64{1, 1, 1}, nanAt: [2]int{2, 3}}
	_, err := runScripted(context.Background(), s, dataset(10), dataset(2), Settings{Epochs: 3, BatchSize: 4}, nil)
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
	_, err := runScripted(ctx, s, dataset(100), nil, Settings{Epochs: 100, BatchSize: 10, Callbacks: Callbacks{OnStep: func(p Progress) {
		calls++
		require.Greater(t, p.SamplesPerSec, 0.0)
		if calls == 15 {
			cancel()
		}
	}}}, nil)
	require.ErrorIs(t, err, context.Canceled)
	require.Equal(t, 15, s.steps)
}

func TestSettingsErrors(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64)}
	_, err := runScripted(context.Background(), s, dataset(4), nil, Settings{Patience: 2}, nil)
	require.ErrorIs(t, err, ErrConfig)
	_, err = runScripted(context.Background(), s, dataset(4), nil, Settings{Epochs: -1}, nil)
	require.ErrorIs(t, err, ErrConfig)
	_, err = runScripted(context.Background(), s, nil, nil, Settings{}, nil)
	require.ErrorIs(t, err, ErrConfig)
	for _, bad := range []Settings{
		{BatchSize: -1}, {Patience: -1}, {MinDelta: math.NaN()},
		{Optimizer: Optimizer{Rate: -1}}, {Optimizer: Optimizer{Beta1: 1}}, {Optimizer: Optimizer{Beta2: 1}},
		{Optimizer: Optimizer{WeightDecay: -1}}, {Optimizer: Optimizer{ClipNorm: math.Inf(1)}},
		{Objective: Variational{}}, // another kind's objective
		{Objective: Reconstruction{Noise: Corruption{Kind: MaskingNoise, Level: 1}}},
		{Objective: Reconstruction{Noise: Corruption{Kind: "blur", Level: 0.1}}},
		{Objective: Reconstruction{Sparsity: Sparsity{Kind: L1Sparsity}}},
	} {
		_, err := bad.resolve("ae")
		require.ErrorIs(t, err, ErrConfig, "%+v", bad)
	}
	// a pointer to an objective is the objective; a nil one the default
	r, err := Settings{Objective: &Reconstruction{Sparsity: Sparsity{Kind: L1Sparsity, Weight: 0.1}}}.resolve("ae")
	require.NoError(t, err)
	require.Equal(t, Reconstruction{Sparsity: Sparsity{Kind: L1Sparsity, Weight: 0.1}, HeadWeight: 1}, r.Objective)
	r, err = Settings{Objective: (*Variational)(nil)}.resolve("vae")
	require.NoError(t, err)
	require.IsType(t, Variational{}, r.Objective)
	_, err = Settings{Objective: &Adversarial{}}.resolve("ae")
	require.ErrorIs(t, err, ErrConfig)

	// a negative Beta1 asks for no momentum, which zero cannot
	r, err = Settings{Optimizer: Optimizer{Beta1: -1}}.resolve("gan")
	require.NoError(t, err)
	require.Equal(t, -1.0, r.Optimizer.Beta1, "resolved settings given back must still mean no momentum")
	r, err = Settings{}.resolve("gan")
	require.NoError(t, err)
	require.Equal(t, 0.5, r.Optimizer.Beta1)
	require.Equal(t, 2e-4, r.Optimizer.Rate)
}

// Resuming from a history continues at the next epoch and keeps the
// record.
func TestResumeFromHistory(t *testing.T) {
	s := &scripted{p: layers.NewParam("w", 1, 1, layers.Float64), val: []float64{3, 2, 1, 0.5}}
	h, err := runScripted(context.Background(), s, dataset(4), dataset(1), Settings{Epochs: 2, BatchSize: 4}, nil)
	require.NoError(t, err)
	require.Len(t, h.Epochs, 2)
	h2, err := runScripted(context.Background(), s, dataset(4), dataset(1), Settings{Epochs: 4, BatchSize: 4}, h)
	require.NoError(t, err)
	require.Len(t, h2.Epochs, 4)
	require.Equal(t, 4, h2.BestEpoch)
	require.Len(t, h.Epochs, 2, "the starting history is not modified")
}

// Schedules from their definitions: linear warm-up (Bowman et al. 2016)
// and cyclical with ratio 0.5 (Fu et al. 2019).
func TestBetaSchedules(t *testing.T) {
	lin := BetaSchedule{Kind: BetaLinear, Steps: 10}
	require.Equal(t, 0.0, lin.Factor(0))
	require.Equal(t, 0.5, lin.Factor(5))
	require.Equal(t, 1.0, lin.Factor(50))
	cyc := BetaSchedule{Kind: BetaCyclical, Steps: 10, Ratio: 0.5}
	require.Equal(t, 0.0, cyc.Factor(0))
	require.InDelta(t, 0.4, cyc.Factor(2), 1e-15)
	require.Equal(t, 1.0, cyc.Factor(7))
	require.Equal(t, 0.0, cyc.Factor(10))
	require.InDelta(t, 0.8, cyc.Factor(14), 1e-15)
	require.Equal(t, 1.0, BetaSchedule{Kind: BetaConstant}.Factor(99))
}
