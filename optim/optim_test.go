package optim

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
)

func allKinds(t *testing.T) map[string]func() Optimizer {
	mk := func(o Optimizer, err error) Optimizer { require.NoError(t, err); return o }
	return map[string]func() Optimizer{
		"sgd":      func() Optimizer { return mk(NewSGD(SGDConfig{Rate: 0.05, Momentum: 0.9, Nesterov: true})) },
		"adam":     func() Optimizer { return mk(NewAdam(AdamConfig{Rate: 0.01})) },
		"adamw":    func() Optimizer { return mk(NewAdamW(AdamConfig{Rate: 0.01, WeightDecay: 0.1})) },
		"rmsprop":  func() Optimizer { return mk(NewRMSprop(RMSpropConfig{Rate: 0.01, Momentum: 0.3})) },
		"sgdplain": func() Optimizer { return mk(NewSGD(SGDConfig{Rate: 0.05})) },
	}
}

func randomGrads(rng *rand.Rand, ps []*layers.Param) {
	for _, p := range ps {
		for i := range p.Grad32() {
			p.Grad32()[i] = float32(rng.NormFloat64())
		}
		for i := range p.Grad64() {
			p.Grad64()[i] = rng.NormFloat64()
		}
	}
}

func newParams() []*layers.Param {
	return []*layers.Param{layers.NewParam("a", 3, 4, layers.Float32), layers.NewParam("b", 1, 4, layers.Float64)}
}

// Exporting the state halfway and restoring it into a fresh optimiser gives
// bitwise the same parameters as an uninterrupted run.
func TestExportImportResumesBitwise(t *testing.T) {
	for name, mk := range allKinds(t) {
		t.Run(name, func(t *testing.T) {
			straight, resumed := newParams(), newParams()
			rngA, rngB := rand.New(rand.NewPCG(1, 1)), rand.New(rand.NewPCG(1, 1))
			oa := mk()
			for i := 0; i < 10; i++ {
				randomGrads(rngA, straight)
				require.NoError(t, oa.Update(straight))
			}
			ob := mk()
			for i := 0; i < 4; i++ {
				randomGrads(rngB, resumed)
				require.NoError(t, ob.Update(resumed))
			}
			st := ob.Export()
			oc := mk()
			require.NoError(t, oc.Import(st))
			require.Equal(t, 4, oc.Steps())
			for i := 4; i < 10; i++ {
				randomGrads(rngB, resumed)
				require.NoError(t, oc.Update(resumed))
			}
			for i := range straight {
				require.Equal(t, straight[i].F32(), resumed[i].F32())
				require.Equal(t, straight[i].F64(), resumed[i].F64())
			}
		})
	}
}

func TestImportRejectsMismatch(t *testing.T) {
	a, _ := NewAdam(AdamConfig{Rate: 0.1})
	s, _ := NewSGD(SGDConfig{Rate: 0.1, Momentum: 0.5})
	require.Error(t, a.Import(s.Export()))
	require.Error(t, a.Import(&State{Kind: "adam", Slots: map[string][][]float64{"a": {{1}}}}))
	require.NoError(t, a.Import(&State{Kind: "adam", Steps: 1, Slots: map[string][][]float64{"a": {{1}, {1}}}}))
	ps := newParams()
	require.ErrorContains(t, a.Update(ps), "restored state")
}

func TestUpdateAllocatesNothingAfterFirst(t *testing.T) {
	for name, mk := range allKinds(t) {
		o := mk()
		ps := newParams()
		require.NoError(t, o.Update(ps))
		allocs := testing.AllocsPerRun(20, func() { _ = o.Update(ps) })
		require.Zero(t, allocs, name)
	}
}

func TestFrozenParamsUntouched(t *testing.T) {
	ps := newParams()
	ps[0].SetFrozen(true)
	randomGrads(rand.New(rand.NewPCG(2, 2)), ps)
	before := append([]float32(nil), ps[0].F32()...)
	o, _ := NewAdam(AdamConfig{Rate: 0.1})
	require.NoError(t, o.Update(ps))
	require.Equal(t, before, ps[0].F32())
	require.NotEqual(t, 0.0, ps[1].F64()[0])
}

func TestConfigValidation(t *testing.T) {
	_, err := NewSGD(SGDConfig{})
	require.ErrorIs(t, err, ErrConfig)
	_, err = NewSGD(SGDConfig{Rate: 1, Nesterov: true})
	require.ErrorIs(t, err, ErrConfig)
	_, err = NewAdam(AdamConfig{Rate: 1, Beta1: 1})
	require.ErrorIs(t, err, ErrConfig)
	_, err = NewAdam(AdamConfig{Rate: math.NaN()})
	require.ErrorIs(t, err, ErrConfig)
	_, err = NewRMSprop(RMSpropConfig{Rate: 1, Momentum: -1})
	require.ErrorIs(t, err, ErrConfig)
}

// Schedules against their closed forms (common practice, no source).
func TestSchedules(t *testing.T) {
	tests := []struct {
		s    Schedule
		step int
		want float64
	}{
		{StepDecay{Every: 3, Gamma: 0.5}, 0, 1},
		{StepDecay{Every: 3, Gamma: 0.5}, 3, 0.5},
		{StepDecay{Every: 3, Gamma: 0.5}, 7, 0.25},
		{Cosine{Steps: 10}, 0, 1},
		{Cosine{Steps: 10}, 5, 0.5},
		{Cosine{Steps: 10, Min: 0.1}, 10, 0.1},
		{Cosine{Steps: 10, Min: 0.2}, 5, 0.6},
		{Warmup{Steps: 4}, 0, 0.25},
		{Warmup{Steps: 4}, 3, 1},
		{Warmup{Steps: 4}, 9, 1},
		{Warmup{Steps: 4, Then: StepDecay{Every: 2, Gamma: 0.1}}, 6, 0.1},
	}
	for _, tc := range tests {
		require.InDelta(t, tc.want, tc.s.Factor(tc.step), 1e-15, "%T %+v step %d", tc.s, tc.s, tc.step)
	}
	o, _ := NewSGD(SGDConfig{Rate: 2, Schedule: Warmup{Steps: 2}})
	require.Equal(t, 1.0, o.Rate())
}
