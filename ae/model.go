package ae

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/optim"
	"github.com/quernlab/quern/train"
)

// Model is an autoencoder: encoder, decoder, an optional classification
// head, the input scaler fitted at training time and an optional anomaly
// threshold.
//
// Inference methods (Encode, Decode, Reconstruct, RowErrors,
// Contributions, Score, Classify) run without a graph and are safe for
// concurrent use by many goroutines, as long as no goroutine is training
// or changing the model at the same time. Train is not safe for concurrent
// use.
type Model struct {
	cfg       Config
	Encoder   *layers.MLP
	Decoder   *layers.MLP
	Head      *layers.MLP
	Scaler    *data.Scaler
	Threshold *anomaly.Threshold
	// Columns names the input columns (from the training data), used to
	// name the features behind a score.
	Columns []string

	// column range of the training data (scaled), for salt-and-pepper noise
	lo, hi []float32

	noisePCG, shufflePCG *rand.PCG
	noise, shuffle       *rand.Rand
	opt                  optim.Optimizer
	trainPhase           *engine.Phase
	evalPhase            *engine.Phase
	metrics              []train.Metric
	names                []string // metricNames, kept for the training loop
	pool                 sync.Pool
}

// New builds an untrained model from cfg with weights drawn from cfg.Seed.
func New(cfg Config) (*Model, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg = cfg.withDefaults()
	initRNG := rand.New(rand.NewPCG(cfg.Seed, 0))
	m := &Model{cfg: cfg}
	encW := append(append([]int{cfg.Inputs}, cfg.Hidden...), cfg.Latent)
	decW := make([]int, len(encW))
	for i := range encW {
		decW[i] = encW[len(encW)-1-i]
	}
	var err error
	m.Encoder, err = layers.NewMLP(layers.MLPConfig{Name: "encoder", Widths: encW, Hidden: cfg.Activation, LinearHidden: cfg.Linear,
		Output: cfg.CodeActivation, LeakySlope: cfg.LeakySlope, Dropout: cfg.Dropout, Precision: cfg.Precision}, initRNG)
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	m.Decoder, err = layers.NewMLP(layers.MLPConfig{Name: "decoder", Widths: decW, Hidden: cfg.Activation, LinearHidden: cfg.Linear,
		Output: layers.Identity, LeakySlope: cfg.LeakySlope, Dropout: cfg.Dropout, Precision: cfg.Precision}, initRNG)
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	if cfg.Classes > 0 {
		hw := append(append([]int{cfg.Latent}, cfg.HeadHidden...), cfg.Classes)
		m.Head, err = layers.NewMLP(layers.MLPConfig{Name: "head", Widths: hw, Hidden: cfg.Activation, LinearHidden: cfg.Linear,
			LeakySlope: cfg.LeakySlope, Dropout: cfg.Dropout, Precision: cfg.Precision}, initRNG)
		if err != nil {
			return nil, fmt.Errorf("ae: %w", err)
		}
	}
	if cfg.Encoder != nil {
		for i, p := range m.Encoder.Params() {
			if err := p.CopyFrom(cfg.Encoder.Params()[i]); err != nil {
				return nil, fmt.Errorf("ae: %w", err)
			}
		}
		m.cfg.Encoder = nil // weights copied; do not keep the caller's network alive
	}
	m.Encoder.Freeze(cfg.FreezeEncoder)
	m.noisePCG = rand.NewPCG(cfg.Seed, 2)
	m.shufflePCG = rand.NewPCG(cfg.Seed, 1)
	m.noise, m.shuffle = rand.New(m.noisePCG), rand.New(m.shufflePCG)
	opt, err := optim.NewAdamW(optim.AdamConfig{Rate: cfg.Rate, WeightDecay: cfg.WeightDecay, Schedule: cfg.RateSchedule})
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	m.opt = opt
	return m, nil
}

// Config returns the model's configuration with defaults filled in.
func (m *Model) Config() Config { return m.cfg }

// Params lists every parameter: encoder, decoder, then head.
func (m *Model) Params() []*layers.Param {
	ps := append(m.Encoder.Params(), m.Decoder.Params()...)
	if m.Head != nil {
		ps = append(ps, m.Head.Params()...)
	}
	return ps
}

// build is the training (train=true) or evaluation graph for n rows.
func (m *Model) build(trainMode bool) engine.BuildFunc {
	c := m.cfg
	return func(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
		x := g.Input("x", n, c.Inputs)
		// the clean rows are a separate input only when the input is
		// corrupted; otherwise the loss compares with x itself (one copy
		// of the batch fewer per step)
		target := x
		if trainMode && c.Noise.Kind != NoNoise {
			target = g.Input("target", n, c.Inputs)
		}
		code := g.MLP(m.Encoder, x, trainMode)
		var total, recon, sparse, ce *engine.Node
		if !c.HeadOnly {
			out := g.MLP(m.Decoder, code, trainMode)
			if c.Loss == BCE {
				recon = losses.GraphBCEWithLogits(g, out, target)
			} else {
				recon = losses.GraphMSE(g, out, target)
			}
			total = recon
		}
		switch c.Sparsity.Kind {
		case L1Sparsity:
			sparse = losses.GraphL1Activity(g, code)
		case KLSparsity:
			sparse = losses.GraphKLSparsity(g, code, c.Sparsity.Target)
		}
		if sparse != nil && total != nil {
			total = g.Add(total, g.Scale(sparse, c.Sparsity.Weight))
		}
		if m.Head != nil {
			logits := g.MLP(m.Head, code, trainMode)
			onehot := g.Input("onehot", n, c.Classes)
			lw := g.Input("labelweight", 1, 1)
			ce = losses.GraphLabelledCrossEntropy(g, logits, onehot, lw)
			if total == nil {
				total = ce
			} else {
				total = g.Add(total, g.Scale(ce, c.HeadWeight))
			}
		}
		var outs []*engine.Node
		for _, o := range []*engine.Node{recon, sparse, ce} {
			if o != nil {
				outs = append(outs, o)
			}
		}
		return total, outs
	}
}

func (m *Model) metricNames() []string {
	names := []string{"loss"}
	if !m.cfg.HeadOnly {
		names = append(names, "reconstruction")
	}
	if m.cfg.Sparsity.Kind != NoSparsity {
		names = append(names, "sparsity")
	}
	if m.Head != nil {
		names = append(names, "classification")
	}
	return names
}

// fill writes a batch into a program's inputs: the clean rows as target,
// the corrupted rows as input (training only), labels one-hot.
func (m *Model) fill(p *engine.Program, x []float32, labels []int, rows int, trainMode bool) {
	c := m.cfg
	if c.Precision == layers.Float64 {
		x64 := p.Input64("x")
		for i, v := range x {
			x64[i] = float64(v)
		}
		if t64 := p.Input64("target"); t64 != nil {
			copy(t64, x64)
		}
		if trainMode {
			corrupt(x64, c.Noise, c.Inputs, m.lo, m.hi, m.noise)
		}
	} else {
		x32 := p.Input32("x")
		copy(x32, x)
		if t32 := p.Input32("target"); t32 != nil {
			copy(t32, x)
		}
		if trainMode {
			corrupt(x32, c.Noise, c.Inputs, m.lo, m.hi, m.noise)
		}
	}
	if trainMode {
		for _, net := range []*layers.MLP{m.Encoder, m.Decoder, m.Head} {
			if net == nil {
				continue
			}
			for i, d := range net.Layers {
				if d.Dropout <= 0 {
					continue
				}
				if name := engine.DropoutName(net, i); p.HasInput(name) {
					if c.Precision == layers.Float64 {
						layers.DropoutMask(p.Input64(name), d.Dropout, m.noise)
					} else {
						layers.DropoutMask(p.Input32(name), d.Dropout, m.noise)
					}
				}
			}
		}
	}
	if m.Head != nil {
		labelled := 0
		set := func(i int, v float64) {
			if c.Precision == layers.Float64 {
				p.Input64("onehot")[i] = v
			} else {
				p.Input32("onehot")[i] = float32(v)
			}
		}
		for r := 0; r < rows; r++ {
			l := data.Unlabelled
			if labels != nil {
				l = labels[r]
			}
			for k := 0; k < c.Classes; k++ {
				v := 0.0
				if k == l {
					v = 1
				}
				set(r*c.Classes+k, v)
			}
			if l >= 0 && l < c.Classes {
				labelled++
			}
		}
		w := 1 / float64(max(labelled, 1))
		if c.Precision == layers.Float64 {
			p.Input64("labelweight")[0] = w
		} else {
			p.Input32("labelweight")[0] = float32(w)
		}
	}
}

func corrupt[T float32 | float64](x []T, c Corruption, cols int, lo, hi []float32, rng *rand.Rand) {
	switch c.Kind {
	case GaussianNoise:
		for i := range x {
			x[i] += T(rng.NormFloat64() * c.Level)
		}
	case MaskingNoise:
		for i := range x {
			if rng.Float64() < c.Level {
				x[i] = 0
			}
		}
	case SaltPepperNoise:
		for i := range x {
			if rng.Float64() < c.Level {
				if rng.IntN(2) == 0 {
					x[i] = T(lo[i%cols])
				} else {
					x[i] = T(hi[i%cols])
				}
			}
		}
	}
}

func (m *Model) outputs(p *engine.Program, loss float64, dst []train.Metric) []train.Metric {
	if m.names == nil {
		m.names = m.metricNames()
	}
	names := m.names
	dst = dst[:0]
	dst = append(dst, train.Metric{Name: names[0], Value: loss})
	for i, n := range names[1:] {
		var v float64
		if m.cfg.Precision == layers.Float64 {
			v = p.Output64(i)[0]
		} else {
			v = float64(p.Output32(i)[0])
		}
		dst = append(dst, train.Metric{Name: n, Value: v})
	}
	return dst
}

// trainee adapts a Model to train.Trainee on data already scaled.
type trainee struct{ m *Model }

func (t trainee) Params() []*layers.Param { return t.m.Params() }

func (t trainee) Step(ctx context.Context, b train.Batch) ([]train.Metric, error) {
	m := t.m
	p, err := m.trainPhase.Program(b.Rows)
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	m.fill(p, b.X, b.Labels, b.Rows, true)
	loss, err := p.Run(engine.RunOptions{})
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	if m.cfg.ClipNorm > 0 {
		optim.ClipGlobalNorm(p.Params(), m.cfg.ClipNorm)
	}
	if err := m.opt.Update(p.Params()); err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	m.metrics = m.outputs(p, loss, m.metrics)
	return m.metrics, nil
}

// evalBatch is the batch size of evaluation passes.
const evalBatch = 256

func (t trainee) Evaluate(d *data.Dataset) ([]train.Metric, error) {
	m := t.m
	var sums []train.Metric
	for start := 0; start < d.Rows; start += evalBatch {
		n := min(evalBatch, d.Rows-start)
		p, err := m.evalPhase.Program(n)
		if err != nil {
			return nil, fmt.Errorf("ae: %w", err)
		}
		var lab []int
		if d.Labels != nil {
			lab = d.Labels[start : start+n]
		}
		m.fill(p, d.X[start*d.Cols:(start+n)*d.Cols], lab, n, false)
		loss, err := p.Run(engine.RunOptions{})
		if err != nil {
			return nil, fmt.Errorf("ae: evaluation: %w", err)
		}
		ms := m.outputs(p, loss, nil)
		if sums == nil {
			sums = make([]train.Metric, len(ms))
			for i := range ms {
				sums[i].Name = ms[i].Name
			}
		}
		for i := range ms {
			sums[i].Value += ms[i].Value * float64(n)
		}
	}
	for i := range sums {
		sums[i].Value /= float64(d.Rows)
	}
	return sums, nil
}

// Train fits the input scaler on trainSet (unless the model already has
// one), then trains on scaled copies of trainSet and valSet (which may be
// nil) through the shared training loop. Training continues from the
// current weights and optimiser state, so Train may be called again.
func (m *Model) Train(ctx context.Context, trainSet, valSet *data.Dataset, cfg train.Config) (*train.History, error) {
	if trainSet == nil || trainSet.Cols != m.cfg.Inputs {
		return nil, fmt.Errorf("ae: training data must have %d columns", m.cfg.Inputs)
	}
	if valSet != nil && valSet.Cols != m.cfg.Inputs {
		return nil, fmt.Errorf("ae: validation data has %d columns, want %d", valSet.Cols, m.cfg.Inputs)
	}
	if m.Scaler == nil {
		s, err := data.Fit(m.cfg.Scaling, trainSet)
		if err != nil {
			return nil, fmt.Errorf("ae: %w", err)
		}
		m.Scaler = s
	}
	if m.Columns == nil {
		m.Columns = trainSet.Columns
	}
	tr, err := m.Scaler.Apply(trainSet)
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	var va *data.Dataset
	if valSet != nil {
		if va, err = m.Scaler.Apply(valSet); err != nil {
			return nil, fmt.Errorf("ae: %w", err)
		}
	}
	m.lo, m.hi = colRange(tr)
	if m.trainPhase == nil {
		m.trainPhase = engine.NewPhase(m.cfg.Precision, true, m.build(true))
		m.evalPhase = engine.NewPhase(m.cfg.Precision, false, m.build(false))
	}
	return train.Run(ctx, trainee{m}, tr, va, cfg, m.shuffle)
}

// Release frees the training graphs (they are rebuilt on the next Train).
func (m *Model) Release() {
	if m.trainPhase != nil {
		m.trainPhase.Close()
		m.evalPhase.Close()
		m.trainPhase, m.evalPhase = nil, nil
	}
}

func colRange(d *data.Dataset) (lo, hi []float32) {
	lo, hi = make([]float32, d.Cols), make([]float32, d.Cols)
	for j := range lo {
		lo[j], hi[j] = float32(math.Inf(1)), float32(math.Inf(-1))
	}
	for i := 0; i < d.Rows; i++ {
		for j, v := range d.Row(i) {
			lo[j], hi[j] = min(lo[j], v), max(hi[j], v)
		}
	}
	return lo, hi
}
