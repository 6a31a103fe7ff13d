package train

import (
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/optim"
)

// aeRecipe trains an autoencoder on its Reconstruction objective.
type aeRecipe struct {
	m     *ae.Model
	c     ae.Config
	obj   Reconstruction
	noise *rand.Rand
	opt   optim.Optimizer

	x, target, onehot, labelWeight *engine.Input
	// mask leaves a table's missing cells out of the reconstruction loss
	// (nil without missing-cell indicators); missing says which inputs a
	// row's indicators mask
	mask    *engine.Input
	missing []missingRule
	// cat holds the one-hot levels of a table's categories (unscaled),
	// the targets of their cross-entropy; catHalf is each input's scaled
	// 0.5, above which a level is the row's
	cat     *engine.Input
	catHalf []float32
	inCat   []bool
	// dropout masks of the training graphs, per network
	dropEnc, dropDec, dropHead []*engine.Input

	trainPhase, evalPhase *engine.Phase
	step                  *move
	// column range of the training data (scaled), for salt-and-pepper noise
	lo, hi []float32
	names  []string
	metric []Metric
}

func newAERecipe(m *ae.Model, s Settings, noise *rand.Rand) (*aeRecipe, error) {
	obj := s.Objective.(Reconstruction)
	c := m.Config()
	if obj.Sparsity.Kind == KLSparsity && c.CodeActivation != layers.Sigmoid {
		return nil, bad("KL sparsity needs a sigmoid code activation")
	}
	if obj.HeadOnly && m.Head == nil {
		return nil, bad("training the head alone needs a model with a classification head")
	}
	opt, err := newOptimizer(s.Optimizer, s.Optimizer.Rate, s.Optimizer.Schedule)
	if err != nil {
		return nil, err
	}
	r := &aeRecipe{m: m, c: c, obj: obj, noise: noise, opt: opt,
		x: engine.NewInput("x"), target: engine.NewInput("target"), onehot: engine.NewInput("onehot"), labelWeight: engine.NewInput("labelweight"),
		dropEnc: engine.DropoutInputs(m.Encoder), dropDec: engine.DropoutInputs(m.Decoder)}
	if m.Head != nil {
		r.dropHead = engine.DropoutInputs(m.Head)
	}
	r.names = []string{"loss"}
	if !obj.HeadOnly {
		r.names = append(r.names, "reconstruction")
	}
	if obj.Sparsity.Kind != NoSparsity {
		r.names = append(r.names, "sparsity")
	}
	if m.Head != nil {
		r.names = append(r.names, "classification")
	}
	r.step = &move{Opt: opt, Times: 1, Fill: func(p *engine.Program, b *batch, _ int) error {
		r.fill(p, b.X, b.Labels, b.Rows, true)
		return nil
	}, After: func(p *engine.Program, loss float64) { r.metric = r.outputs(p, loss, r.metric) }}
	return r, nil
}

func (r *aeRecipe) params() []*layers.Param { return r.m.Params() }

// trainable lists the parameters the training graph differentiates (all
// but a frozen encoder's).
func (r *aeRecipe) trainable() []*layers.Param {
	if !r.obj.FreezeEncoder {
		return r.m.Params()
	}
	ps := r.m.Decoder.Params()
	if r.m.Head != nil {
		ps = append(ps, r.m.Head.Params()...)
	}
	return ps
}

func (r *aeRecipe) prepare(trainSet, valSet *data.Dataset) (*data.Dataset, *data.Dataset, error) {
	if err := checkWidth("ae", r.c.Inputs, trainSet, valSet); err != nil {
		return nil, nil, err
	}
	if err := r.checkLabels(trainSet, valSet); err != nil {
		return nil, nil, err
	}
	tr, va, err := scale("ae", &r.m.Scaler, r.c.Scaling, trainSet, valSet)
	if err != nil {
		return nil, nil, err
	}
	if r.m.Columns == nil {
		r.m.Columns, r.m.Image, r.m.Encoding = trainSet.Columns, trainSet.Image, trainSet.Encoding
	}
	r.lo, r.hi = colRange(tr, r.rowScaler())
	if r.trainPhase == nil {
		r.missing = missingRules(r.m.Encoding, r.m.Scaler, r.c.Inputs)
		if len(r.c.Categories) > 0 {
			r.cat = engine.NewInput("categories")
			r.catHalf = scaledHalf(r.m.Scaler, r.c.Inputs)
			r.inCat = make([]bool, r.c.Inputs)
			for _, sp := range r.c.Categories {
				for j := sp[0]; j < sp[1]; j++ {
					r.inCat[j] = true
				}
			}
		}
		if (len(r.missing) > 0 || r.cat != nil) && r.c.Loss == ae.MSE {
			r.mask = engine.NewInput("mask")
		}
		r.trainPhase = engine.NewPhase(r.c.Precision, true, r.build(true)).Only(r.trainable())
		r.evalPhase = engine.NewPhase(r.c.Precision, false, r.build(false))
		r.step.Phase = r.trainPhase
	}
	return tr, va, nil
}

// checkLabels refuses, for a model with a classification head, a label
// outside its classes (it would pass for unlabelled), and head-only
// training without a labelled row (nothing would train).
func (r *aeRecipe) checkLabels(trainSet, valSet *data.Dataset) error {
	if r.m.Head == nil {
		return nil
	}
	labelled := 0
	for _, d := range []*data.Dataset{trainSet, valSet} {
		if d == nil {
			continue
		}
		for i, l := range d.Labels {
			if l != data.Unlabelled && (l < 0 || l >= r.c.Classes) {
				return fmt.Errorf("ae: row %d has label %d, want 0..%d (or none)", i+1, l, r.c.Classes-1)
			}
			if l != data.Unlabelled && d == trainSet {
				labelled++
			}
		}
	}
	if r.obj.HeadOnly && labelled == 0 {
		return fmt.Errorf("%w: head-only training needs labelled training rows", ErrConfig)
	}
	return nil
}

// build is the training (trainMode) or evaluation graph for n rows.
func (r *aeRecipe) build(trainMode bool) engine.BuildFunc {
	c, obj, m := r.c, r.obj, r.m
	var dropEnc, dropDec, dropHead []*engine.Input
	if trainMode {
		dropEnc, dropDec, dropHead = r.dropEnc, r.dropDec, r.dropHead
	}
	return func(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
		x := g.Input(r.x, n, c.Inputs)
		// the clean rows are a separate input only when the input is
		// corrupted; otherwise the loss compares with x itself (one copy
		// of the batch fewer per step)
		target := x
		if trainMode && obj.Noise.Kind != NoNoise {
			target = g.Input(r.target, n, c.Inputs)
		}
		code := g.MLP(m.Encoder, x, dropEnc)
		var total, recon, sparse, ce *engine.Node
		if !obj.HeadOnly {
			out := g.MLP(m.Decoder, code, dropDec)
			switch {
			case c.Loss == ae.BCE:
				recon = losses.GraphBCEWithLogits(g, out, target)
			case r.mask != nil:
				recon = losses.GraphMaskedMSE(g, out, target, g.Input(r.mask, n, c.Inputs))
				if r.cat != nil {
					// the categories' cross-entropy on the scale of the
					// squared error: summed, divided by every input
					ce := g.GroupedSoftmaxCESum(out, g.Input(r.cat, n, c.Inputs), c.Categories)
					recon = g.Add(recon, g.Scale(ce, 1/float64(n*c.Inputs)))
				}
			default:
				recon = losses.GraphMSE(g, out, target)
			}
			total = recon
		}
		switch obj.Sparsity.Kind {
		case L1Sparsity:
			sparse = losses.GraphL1Activity(g, code)
		case KLSparsity:
			sparse = losses.GraphKLSparsity(g, code, obj.Sparsity.Target)
		}
		if sparse != nil && total != nil {
			total = g.Add(total, g.Scale(sparse, obj.Sparsity.Weight))
		}
		if m.Head != nil {
			logits := g.MLP(m.Head, code, dropHead)
			onehot := g.Input(r.onehot, n, c.Classes)
			lw := g.Input(r.labelWeight, 1, 1)
			ce = losses.GraphLabelledCrossEntropy(g, logits, onehot, lw)
			if total == nil {
				total = ce
			} else {
				total = g.Add(total, g.Scale(ce, obj.HeadWeight))
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

// fill writes a batch into a program's inputs: the clean rows as target,
// the corrupted rows as input (training only), dropout masks (training
// only), labels one-hot.
func (r *aeRecipe) fill(p *engine.Program, x []float32, labels []int, rows int, trainMode bool) {
	c, obj := r.c, r.obj
	if c.Precision == layers.Float64 {
		x64 := p.F64(r.x)
		for i, v := range x {
			x64[i] = float64(v)
		}
		if t64 := p.F64(r.target); t64 != nil {
			copy(t64, x64)
		}
		if trainMode {
			corrupt(x64, obj.Noise, c.Inputs, r.lo, r.hi, r.noise)
		}
	} else {
		x32 := p.F32(r.x)
		copy(x32, x)
		if t32 := p.F32(r.target); t32 != nil {
			copy(t32, x)
		}
		if trainMode {
			corrupt(x32, obj.Noise, c.Inputs, r.lo, r.hi, r.noise)
		}
	}
	if r.mask != nil && p.Has(r.mask) {
		d := c.Inputs
		inCat := r.inCat
		if r.cat != nil && p.Has(r.cat) {
			// a missing category's levels are all 0: no target, no
			// cross-entropy
			setInput(p, r.cat, func(i int) float64 {
				if j := i % d; inCat[j] && x[i] > r.catHalf[j] {
					return 1
				}
				return 0
			})
		}
		setInput(p, r.mask, func(i int) float64 {
			row, j := i/d, i%d
			if inCat != nil && inCat[j] {
				return 0
			}
			for _, m := range r.missing {
				if j >= m.from && j < m.to && x[row*d+m.indicator] > m.above {
					return 0
				}
			}
			return 1
		})
	}
	if trainMode {
		for _, net := range []struct {
			m    *layers.MLP
			drop []*engine.Input
		}{{r.m.Encoder, r.dropEnc}, {r.m.Decoder, r.dropDec}, {r.m.Head, r.dropHead}} {
			for i, in := range net.drop {
				if in == nil || !p.Has(in) {
					continue
				}
				rate := net.m.Layers[i].Dropout
				if c.Precision == layers.Float64 {
					layers.DropoutMask(p.F64(in), rate, r.noise)
				} else {
					layers.DropoutMask(p.F32(in), rate, r.noise)
				}
			}
		}
	}
	if r.m.Head != nil {
		labelled := 0
		k := c.Classes
		for row := 0; row < rows; row++ {
			l := data.Unlabelled
			if labels != nil {
				l = labels[row]
			}
			if l >= 0 && l < k {
				labelled++
			}
		}
		setInput(p, r.onehot, func(i int) float64 {
			l := data.Unlabelled
			if labels != nil {
				l = labels[i/k]
			}
			if i%k == l {
				return 1
			}
			return 0
		})
		setScalar(p, r.labelWeight, 1/float64(max(labelled, 1)))
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

// outputs appends the loss and the graph's outputs, named, to dst[:0].
func (r *aeRecipe) outputs(p *engine.Program, loss float64, dst []Metric) []Metric {
	dst = append(dst[:0], Metric{Name: r.names[0], Value: loss})
	for i, n := range r.names[1:] {
		dst = append(dst, Metric{Name: n, Value: outputScalar(p, i)})
	}
	return dst
}

func (r *aeRecipe) moves() []*move           { return []*move{r.step} }
func (r *aeRecipe) usable(rows int) int      { return rows }
func (r *aeRecipe) metrics() []Metric        { return r.metric }
func (r *aeRecipe) state() any               { return nil }
func (r *aeRecipe) restore(raw []byte) error { return nil }

func (r *aeRecipe) optimizers() map[string]optim.Optimizer {
	return map[string]optim.Optimizer{singleOptimizer: r.opt}
}

func (r *aeRecipe) evaluation() *evaluation {
	return &evaluation{Phase: r.evalPhase, Names: r.names,
		Fill: func(p *engine.Program, x []float32, labels []int, rows int, _ *rand.Rand) {
			r.fill(p, x, labels, rows, false)
		},
		Read: func(p *engine.Program, loss float64, dst []float64) []float64 {
			dst = append(dst, loss)
			for i := range r.names[1:] {
				dst = append(dst, outputScalar(p, i))
			}
			return dst
		}}
}

func (r *aeRecipe) release() {
	if r.trainPhase != nil {
		r.trainPhase.Close()
		r.evalPhase.Close()
		r.trainPhase, r.evalPhase, r.step.Phase = nil, nil, nil
	}
}

func colRange(d *data.Dataset, s *data.Scaler) (lo, hi []float32) {
	lo, hi = make([]float32, d.Cols), make([]float32, d.Cols)
	for j := range lo {
		lo[j], hi[j] = float32(math.Inf(1)), float32(math.Inf(-1))
	}
	scaledRowsDo(d, s, func(x []float32, n int) {
		for i := 0; i < n; i++ {
			for j, v := range x[i*d.Cols : (i+1)*d.Cols] {
				lo[j], hi[j] = min(lo[j], v), max(hi[j], v)
			}
		}
	})
	return lo, hi
}

func (r *aeRecipe) rowScaler() *data.Scaler { return rowScaler(r.m.Scaler) }

// missingRule says which inputs a missing-cell indicator masks: inputs
// from..to-1 (the column's value, or a category's levels) of a row whose
// indicator input, scaled, is above the scaled 0.5.
type missingRule struct {
	from, to, indicator int
	above               float32
}

// missingRules reads a table encoding's indicators (none: nil), with the
// scaler the rows are scaled by (nil: none).
func missingRules(enc *data.Encoding, s *data.Scaler, inputs int) []missingRule {
	if enc == nil || enc.Width() != inputs {
		return nil
	}
	var rules []missingRule
	for _, g := range enc.MissingGroups() {
		rules = append(rules, missingRule{from: g.From, to: g.To, indicator: g.Indicator})
	}
	if len(rules) == 0 {
		return nil
	}
	half := scaledHalf(s, inputs)
	for i := range rules {
		rules[i].above = half[rules[i].indicator]
	}
	return rules
}

// scaledHalf is 0.5 in every input, scaled by s (nil: none): the level
// between a one-hot or indicator input's 0 and 1.
func scaledHalf(s *data.Scaler, inputs int) []float32 {
	half := make([]float32, inputs)
	for j := range half {
		half[j] = 0.5
	}
	if s != nil {
		s.ApplyRows(half)
	}
	return half
}
