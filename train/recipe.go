package train

import (
	"fmt"
	"github.com/quernlab/quern/modelfile"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/optim"
)

// Helpers the recipes share: filling inputs and reading outputs in either
// precision, scaling the data, and making optimisers.

// setInput writes f(i) into every element of an input of either precision
// (nothing when the program lacks the input).
func setInput(p *engine.Program, in *engine.Input, f func(i int) float64) {
	if v := p.F64(in); v != nil {
		for i := range v {
			v[i] = f(i)
		}
		return
	}
	v := p.F32(in)
	for i := range v {
		v[i] = float32(f(i))
	}
}

// setScalar writes v into a 1 x 1 input.
func setScalar(p *engine.Program, in *engine.Input, v float64) {
	if x := p.F64(in); x != nil {
		x[0] = v
		return
	}
	if x := p.F32(in); x != nil {
		x[0] = float32(v)
	}
}

// outputScalar reads scalar output i.
func outputScalar(p *engine.Program, i int) float64 {
	if p.Precision() == layers.Float64 {
		return p.Output64(i)[0]
	}
	return float64(p.Output32(i)[0])
}

// output returns program output i as float64, converting float32 values
// into *buf (grown once, then reused step after step).
func output(p *engine.Program, i int, buf *[]float64) []float64 {
	if p.Precision() == layers.Float64 {
		return p.Output64(i)
	}
	o := p.Output32(i)
	if cap(*buf) < len(o) {
		*buf = make([]float64, len(o))
	}
	r := (*buf)[:len(o)]
	for k, v := range o {
		r[k] = float64(v)
	}
	return r
}

// scale fits the model's scaler on the training rows the first time
// (*scaler nil) and returns scaled copies of both sets (val may be nil).
func scale(pkg string, scaler **data.Scaler, kind data.ScaleKind, trainSet, valSet *data.Dataset) (*data.Dataset, *data.Dataset, error) {
	if *scaler == nil {
		s, err := data.Fit(kind, trainSet)
		if err != nil {
			return nil, nil, fmt.Errorf("%s: %w", pkg, err)
		}
		*scaler = s
	}
	tr, err := (*scaler).Apply(trainSet)
	if err != nil {
		return nil, nil, fmt.Errorf("%s: %w", pkg, err)
	}
	var va *data.Dataset
	if valSet != nil {
		if va, err = (*scaler).Apply(valSet); err != nil {
			return nil, nil, fmt.Errorf("%s: %w", pkg, err)
		}
	}
	return tr, va, nil
}

// checkWidth reports training or validation rows of the wrong width.
func checkWidth(pkg string, width int, trainSet, valSet *data.Dataset) error {
	if trainSet == nil || trainSet.Cols != width {
		return fmt.Errorf("%s: training data must have %d columns", pkg, width)
	}
	if valSet != nil && valSet.Cols != width {
		return fmt.Errorf("%s: validation data has %d columns, want %d", pkg, valSet.Cols, width)
	}
	return nil
}

// newOptimizer makes the optimiser of the settings with the given rate
// and schedule.
func newOptimizer(o Optimizer, rate float64, sched optim.Schedule) (optim.Optimizer, error) {
	b1 := o.Beta1
	if b1 == 0 {
		b1 = -1 // optim's way of asking for no momentum
	}
	opt, err := optim.NewAdamW(optim.AdamConfig{Rate: rate, Beta1: b1, Beta2: o.Beta2, WeightDecay: o.WeightDecay, Schedule: sched})
	if err != nil {
		return nil, fmt.Errorf("train: %w", err)
	}
	return opt, nil
}

// singleOptimizer is the checkpoint prefix of the one optimiser of the
// autoencoder and the VAE.
const singleOptimizer = modelfile.TrainingPrefix
