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
	for _, d := range []*data.Dataset{trainSet, valSet} {
		if d != nil {
			if err := (*scaler).Validate(d.Cols); err != nil {
				return nil, nil, fmt.Errorf("%s: %w", pkg, err)
			}
		}
	}
	// the rows stay raw: the loop scales each batch as it copies it
	// (rowScaler), so no scaled copy of the data is ever held
	return trainSet, valSet, nil
}

// rowScaler is the scaler rows go through on their way into a graph, nil
// when it changes nothing.
func rowScaler(s *data.Scaler) *data.Scaler {
	if s == nil || s.Identity() {
		return nil
	}
	return s
}

// scalesRows is implemented by recipes whose rows are scaled on their way
// into the graphs.
type scalesRows interface {
	rowScaler() *data.Scaler
}

// scaledRowsDo calls fn on d's rows, scaled by s (nil: as they are), a
// block of rows at a time through one buffer, so that figures over scaled
// rows need no scaled copy of the data.
func scaledRowsDo(d *data.Dataset, s *data.Scaler, fn func(rows []float32, n int)) {
	if s == nil {
		fn(d.X, d.Rows)
		return
	}
	const block = 1024
	buf := make([]float32, min(block, d.Rows)*d.Cols)
	for lo := 0; lo < d.Rows; lo += block {
		hi := min(d.Rows, lo+block)
		b := buf[:(hi-lo)*d.Cols]
		copy(b, d.X[lo*d.Cols:hi*d.Cols])
		s.ApplyRows(b)
		fn(b, hi-lo)
	}
}

// scaledCopy returns d's rows scaled by the recipe's scaler (d itself
// when there is none), for tests that fill graphs by hand.
func scaledCopy(r recipe, d *data.Dataset) *data.Dataset {
	sr, ok := r.(scalesRows)
	if !ok || sr.rowScaler() == nil {
		return d
	}
	out := *d
	out.X = append([]float32(nil), d.X...)
	sr.rowScaler().ApplyRows(out.X)
	return &out
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
