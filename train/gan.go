package train

import (
	"encoding/json"
	"fmt"
	"github.com/quernlab/quern/modelfile"
	"math"
	"math/rand/v2"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/optim"
)

// Checkpoint prefixes of a GAN's two optimisers.
const (
	generatorOptimizer     = modelfile.TrainingPrefix + "generator/"
	discriminatorOptimizer = modelfile.TrainingPrefix + "discriminator/"
)

// ganRecipe trains a GAN on its Adversarial objective: each step is
// DiscSteps discriminator moves (the first on the loop's batch, the others
// on rows drawn from the training rows) and one generator move; while one
// network moves, the other's weights stay bitwise unchanged (each move's
// graph differentiates only its own network).
type ganRecipe struct {
	m       *gan.Model
	c       gan.Config
	obj     Adversarial
	noise   *rand.Rand
	genOpt  optim.Optimizer
	discOpt optim.Optimizer
	warn    func(Warning)

	real, realLabels, noiseIn, fakeLabels *engine.Input
	sigma                                 []*engine.Input
	// gumbel holds the Gumbel noise of the categories' Gumbel-softmax
	// (nil without categories)
	gumbel *engine.Input

	dPhase, gPhase, evalPhase *engine.Phase
	dMove, gMove              *move

	train      *data.Dataset // scaled training rows, for the extra discriminator steps
	dataSpread float64
	// step state
	dLoss, gLoss float64
	lr, lf, fake []float64
	bufs         [4][]float64 // float32 outputs converted: D real, D fake, G fake logits, G samples
	extra        []float32
	extraY       []int
	labels       []int
	metric       []Metric
	steps        int
	winning      int
	warned       map[string]int
	evalOut      [2][]float64 // the evaluation's discriminator outputs
}

// ganState is a GAN recipe's own training state in checkpoints.
type ganState struct {
	Steps   int `json:"steps"`
	Winning int `json:"winning_steps"`
}

func newGANRecipe(m *gan.Model, s Settings, noise *rand.Rand, warn func(Warning)) (*ganRecipe, error) {
	obj := s.Objective.(Adversarial)
	c := m.Config()
	if s.BatchSize%c.Pack != 0 {
		return nil, bad("batch size %d is not a multiple of the pack size %d", s.BatchSize, c.Pack)
	}
	genOpt, err := newOptimizer(s.Optimizer, s.Optimizer.Rate, s.Optimizer.Schedule)
	if err != nil {
		return nil, err
	}
	dSched := s.Optimizer.Schedule
	if dSched != nil && obj.DiscSteps > 1 {
		dSched = stretched{dSched, obj.DiscSteps}
	}
	discOpt, err := newOptimizer(s.Optimizer, obj.DiscriminatorRate, dSched)
	if err != nil {
		return nil, err
	}
	r := &ganRecipe{m: m, c: c, obj: obj, noise: noise, genOpt: genOpt, discOpt: discOpt, warn: warn, warned: map[string]int{},
		real: engine.NewInput("real"), realLabels: engine.NewInput("real_labels"), noiseIn: engine.NewInput("noise"), fakeLabels: engine.NewInput("fake_labels")}
	if c.SpectralNorm {
		for l := range len(m.Discriminator.Front) + len(m.Discriminator.Layers) {
			r.sigma = append(r.sigma, engine.NewInput(fmt.Sprintf("invsigma.%d", l)))
		}
	}
	r.dMove = &move{Opt: discOpt, Times: obj.DiscSteps,
		Before: func(int) {
			if c.SpectralNorm {
				m.PowerIteration()
			}
		},
		Fill: func(p *engine.Program, b *batch, k int) error {
			x, labels := b.X, b.Labels
			if k > 0 {
				x, labels = r.extraRows(b.Rows)
			}
			r.fillReal(p, x, labels)
			r.fillCommon(p, b.Rows, r.noise)
			return nil
		},
		After: func(p *engine.Program, loss float64) {
			r.dLoss, r.lr, r.lf = loss, output(p, 0, &r.bufs[0]), output(p, 1, &r.bufs[1])
		}}
	r.gMove = &move{Opt: genOpt, Times: 1,
		Fill: func(p *engine.Program, b *batch, _ int) error {
			r.fillCommon(p, b.Rows, r.noise)
			return nil
		},
		After: func(p *engine.Program, loss float64) {
			r.gLoss, r.fake = loss, output(p, 1, &r.bufs[3])
		}}
	return r, nil
}

// stretched stretches a schedule over the discriminator's DiscSteps
// updates per generator update, so both follow the same course.
type stretched struct {
	s optim.Schedule
	k int
}

func (s stretched) Factor(step int) float64 { return s.s.Factor(step / s.k) }

// extraRows draws rows of the training rows for an extra discriminator
// step, into buffers kept between steps.
func (r *ganRecipe) extraRows(rows int) ([]float32, []int) {
	w := r.c.Outputs
	if cap(r.extra) < rows*w {
		r.extra, r.extraY = make([]float32, rows*w), make([]int, rows)
	}
	x, y := r.extra[:rows*w], r.extraY[:rows]
	if r.c.Classes == 0 {
		y = nil
	}
	for row := 0; row < rows; row++ {
		i := r.noise.IntN(r.train.Rows)
		copy(x[row*w:], r.train.Row(i))
		if s := r.rowScaler(); s != nil {
			s.ApplyRows(x[row*w : (row+1)*w])
		}
		if y != nil {
			y[row] = r.train.Labels[i]
		}
	}
	return x, y
}

func (r *ganRecipe) params() []*layers.Param { return r.m.Params() }

func (r *ganRecipe) rowScaler() *data.Scaler { return rowScaler(r.m.Scaler) }

// spreadScaled is spread over d's rows scaled by s, without a scaled copy:
// each column's mean and deviation are summed in the same order as
// spread's.
func spreadScaled(d *data.Dataset, s *data.Scaler) float64 {
	if s == nil {
		return spread(d.X, d.Rows, d.Cols)
	}
	cols := d.Cols
	val := func(r, j int) float64 {
		return float64(float32((float64(d.X[r*cols+j]) - s.Offset[j]) * s.Factor[j]))
	}
	var total float64
	for j := 0; j < cols; j++ {
		var m, sq float64
		for r := 0; r < d.Rows; r++ {
			m += val(r, j)
		}
		m /= float64(d.Rows)
		for r := 0; r < d.Rows; r++ {
			dv := val(r, j) - m
			sq += dv * dv
		}
		total += math.Sqrt(sq / float64(max(d.Rows-1, 1)))
	}
	return total / float64(cols)
}

func (r *ganRecipe) usable(rows int) int { return rows - rows%r.c.Pack }

func (r *ganRecipe) prepare(trainSet, valSet *data.Dataset) (*data.Dataset, *data.Dataset, error) {
	c := r.c
	if trainSet == nil || trainSet.Cols != c.Outputs || trainSet.Rows == 0 {
		return nil, nil, fmt.Errorf("gan: training data must have %d columns", c.Outputs)
	}
	if trainSet.Rows < c.Pack {
		return nil, nil, fmt.Errorf("gan: %d training rows, fewer than the %d the discriminator sees at once (Pack)", trainSet.Rows, c.Pack)
	}
	for _, d := range []*data.Dataset{trainSet, valSet} {
		if d == nil {
			continue
		}
		if d.Cols != c.Outputs {
			return nil, nil, fmt.Errorf("gan: data has %d columns, want %d", d.Cols, c.Outputs)
		}
		if c.Classes > 0 {
			if d.Labels == nil {
				return nil, nil, fmt.Errorf("gan: a conditional model needs labels")
			}
			for i, l := range d.Labels {
				if l < 0 || l >= c.Classes {
					return nil, nil, fmt.Errorf("gan: row %d has label %d, want 0..%d", i+1, l, c.Classes-1)
				}
			}
		}
	}
	tr, va, err := scale("gan", &r.m.Scaler, c.Scaling, trainSet, valSet)
	if err != nil {
		return nil, nil, err
	}
	if s := r.m.Scaler; s != nil && len(c.Categories) > 0 {
		// the categories' levels stay 0/1, as the generator's softmax
		// makes them
		for _, sp := range c.Categories {
			for j := sp[0]; j < sp[1] && j < len(s.Offset); j++ {
				s.Offset[j], s.Factor[j] = 0, 1
			}
		}
	}
	if len(c.Categories) > 0 && r.gumbel == nil {
		r.gumbel = engine.NewInput("gumbel")
	}
	if r.m.Columns == nil {
		r.m.Columns, r.m.Image, r.m.Encoding = trainSet.Columns, trainSet.Image, trainSet.Encoding
	}
	r.train = tr
	r.dataSpread = math.Max(spreadScaled(tr, r.rowScaler()), 1e-12)
	if r.dPhase == nil {
		r.dPhase = engine.NewPhase(c.Precision, true, r.buildD).Only(r.m.Discriminator.Params())
		r.gPhase = engine.NewPhase(c.Precision, true, r.buildG).Only(r.m.Generator.Params())
		r.evalPhase = engine.NewPhase(c.Precision, false, r.buildD)
		r.dMove.Phase, r.gMove.Phase = r.dPhase, r.gPhase
	}
	return tr, va, nil
}

// sigmaInputs places one 1/sigma input per discriminator layer when
// spectral normalisation is on (nil otherwise).
func (r *ganRecipe) sigmaInputs(g *engine.Graph) []*engine.Node {
	if r.sigma == nil {
		return nil
	}
	s := make([]*engine.Node, len(r.sigma))
	for l, in := range r.sigma {
		s[l] = g.Sum(g.Input(in, 1, 1))
	}
	return s
}

// discriminate builds the discriminator's logits for inputs x (rows x
// Outputs) with one-hot labels y (nil when unconditional), packing Pack
// rows per decision; sig holds the spectral scales (see sigmaInputs).
func (r *ganRecipe) discriminate(g *engine.Graph, x, y *engine.Node, sig []*engine.Node) *engine.Node {
	c := r.c
	h := x
	convs := r.m.Discriminator.Front
	for l, cv := range convs {
		var scale *engine.Node
		if sig != nil {
			scale = sig[l]
		}
		h = g.ConvLayer(cv, h, scale)
	}
	if y != nil {
		h = g.Concat(x, y)
	}
	if c.Pack > 1 {
		h = g.Reshape(h, x.Rows()/c.Pack, c.Pack*(c.Outputs+c.Classes))
	}
	for l, d := range r.m.Discriminator.Layers {
		w := g.Param(d.W)
		if sig != nil {
			w = g.Mul(sig[len(convs)+l], w)
		}
		h = g.AffineAct(h, w, g.Param(d.B), d.Act, d.Slope)
	}
	return h
}

func (r *ganRecipe) generate(g *engine.Graph, n int) (fake, fakeY *engine.Node) {
	z := g.Input(r.noiseIn, n, r.c.Noise)
	if r.c.Classes > 0 {
		fakeY = g.Input(r.fakeLabels, n, r.c.Classes)
		z = g.Concat(z, fakeY)
	}
	out := g.MLP(r.m.Generator, z, nil)
	if r.gumbel != nil {
		out = r.gumbelSoftmax(g, out, g.Input(r.gumbel, n, r.c.Outputs))
	}
	return out, fakeY
}

// gumbelSoftmax passes each category's outputs, plus Gumbel noise,
// through a softmax at the configured temperature (Jang et al. 2017);
// the other columns pass as they are.
func (r *ganRecipe) gumbelSoftmax(g *engine.Graph, out, noise *engine.Node) *engine.Node {
	var res *engine.Node
	join := func(p *engine.Node) {
		if res == nil {
			res = p
		} else {
			res = g.Concat(res, p)
		}
	}
	at := 0
	for _, s := range r.c.Categories {
		if s[0] > at {
			join(g.Slice(out, at, s[0]))
		}
		logits := g.Scale(g.Add(g.Slice(out, s[0], s[1]), g.Slice(noise, s[0], s[1])), 1/r.c.Temperature)
		join(g.Exp(g.LogSoftmax(logits)))
		at = s[1]
	}
	if at < r.c.Outputs {
		join(g.Slice(out, at, r.c.Outputs))
	}
	return res
}

func (r *ganRecipe) buildD(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
	c := r.c
	real := g.Input(r.real, n, c.Outputs)
	var realY *engine.Node
	if c.Classes > 0 {
		realY = g.Input(r.realLabels, n, c.Classes)
	}
	fake, fakeY := r.generate(g, n)
	sig := r.sigmaInputs(g)
	lr, lf := r.discriminate(g, real, realY, sig), r.discriminate(g, fake, fakeY, sig)
	var loss *engine.Node
	if c.Critic == gan.Wasserstein {
		loss = losses.GraphWassersteinCritic(g, lr, lf)
	} else {
		loss = losses.GraphDiscriminatorBCE(g, lr, lf, 1-r.obj.LabelSmoothing)
	}
	return loss, []*engine.Node{lr, lf}
}

func (r *ganRecipe) buildG(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
	fake, fakeY := r.generate(g, n)
	lf := r.discriminate(g, fake, fakeY, r.sigmaInputs(g))
	var loss *engine.Node
	switch {
	case r.c.Critic == gan.Wasserstein:
		loss = losses.GraphWassersteinGenerator(g, lf)
	case r.obj.Loss == Minimax:
		loss = losses.GraphGeneratorMinimax(g, lf)
	default:
		loss = losses.GraphGeneratorNonSaturating(g, lf)
	}
	return loss, []*engine.Node{lf, fake}
}

// fillCommon writes the generator's noise (and drawn classes) and the
// spectral scales.
func (r *ganRecipe) fillCommon(p *engine.Program, n int, rng *rand.Rand) {
	setInput(p, r.noiseIn, func(int) float64 { return rng.NormFloat64() })
	if r.gumbel != nil && p.Has(r.gumbel) {
		setInput(p, r.gumbel, func(int) float64 {
			u := rng.Float64()
			for u == 0 {
				u = rng.Float64()
			}
			return -math.Log(-math.Log(u))
		})
	}
	if k := r.c.Classes; k > 0 {
		if cap(r.labels) < n {
			r.labels = make([]int, n)
		}
		labels := r.labels[:n]
		for i := range labels {
			labels[i] = rng.IntN(k)
		}
		setInput(p, r.fakeLabels, func(i int) float64 { return b2f(labels[i/k] == i%k) })
	}
	for l, s := range r.m.SpectralScale {
		if l < len(r.sigma) && p.Has(r.sigma[l]) {
			setInput(p, r.sigma[l], func(int) float64 { return s })
		}
	}
}

func (r *ganRecipe) fillReal(p *engine.Program, x []float32, labels []int) {
	setInput(p, r.real, func(i int) float64 { return float64(x[i]) })
	if k := r.c.Classes; k > 0 {
		setInput(p, r.realLabels, func(i int) float64 { return b2f(labels[i/k] == i%k) })
	}
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

func (r *ganRecipe) moves() []*move { return []*move{r.dMove, r.gMove} }

// metrics are d_loss, g_loss, d_real (mean D(x)), d_fake (mean D(G(z))),
// d_accuracy and spread (generated spread over the data's); the step's
// warnings are raised here.
func (r *ganRecipe) metrics() []Metric {
	c, obj := r.c, r.obj
	r.steps++
	correct := 0
	for _, v := range r.lr {
		if v > 0 {
			correct++
		}
	}
	for _, v := range r.lf {
		if v < 0 {
			correct++
		}
	}
	rows := len(r.fake) / c.Outputs
	acc := float64(correct) / float64(len(r.lr)+len(r.lf))
	sp := spread(r.fake, rows, c.Outputs) / r.dataSpread
	if c.Critic == gan.BCECritic {
		if acc > obj.WinningAccuracy {
			r.winning++
		} else {
			r.winning = 0
		}
		if r.winning >= obj.WinningSteps && r.due("discriminator_wins") {
			r.raise("discriminator_wins", fmt.Sprintf("discriminator accuracy above %.2f for %d steps: the generator's gradient is vanishing", obj.WinningAccuracy, r.winning))
		}
	}
	if sp < obj.CollapseRatio && r.due("collapse") {
		r.raise("collapse", fmt.Sprintf("generated spread is %.3f of the data's: samples are collapsing", sp))
	}
	dReal, dFake := r.outputMean(r.lr), r.outputMean(r.lf)
	r.metric = append(r.metric[:0],
		Metric{Name: "d_loss", Value: r.dLoss},
		Metric{Name: "g_loss", Value: r.gLoss},
		Metric{Name: "d_real", Value: dReal},
		Metric{Name: "d_fake", Value: dFake},
		Metric{Name: "d_accuracy", Value: acc},
		Metric{Name: "spread", Value: sp})
	return r.metric
}

// outputMean is the discriminator's mean output as the figures report
// it: a probability for the BCE critic, the raw score for Wasserstein.
func (r *ganRecipe) outputMean(v []float64) float64 {
	if r.c.Critic == gan.Wasserstein {
		return mean(v)
	}
	return sigmoidMean(v)
}

// due reports whether a warning of the kind may be raised: at most once
// per kind in 500 steps (checked before its message is written).
func (r *ganRecipe) due(kind string) bool {
	last, ok := r.warned[kind]
	return !ok || r.steps-last >= 500
}

// raise passes a warning on; the caller has checked due.
func (r *ganRecipe) raise(kind, msg string) {
	r.warned[kind] = r.steps
	if r.warn != nil {
		r.warn(Warning{Step: r.steps, Kind: kind, Message: msg})
	}
}

func sigmoidMean(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += layers.Sigmoid.Eval(x, 0)
	}
	return s / float64(len(v))
}

func mean(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// spread is the mean over columns of the standard deviation of rows.
func spread[T float32 | float64](x []T, rows, cols int) float64 {
	var total float64
	for j := 0; j < cols; j++ {
		var m, s float64
		for r := 0; r < rows; r++ {
			m += float64(x[r*cols+j])
		}
		m /= float64(rows)
		for r := 0; r < rows; r++ {
			d := float64(x[r*cols+j]) - m
			s += d * d
		}
		total += math.Sqrt(s / float64(max(rows-1, 1)))
	}
	return total / float64(cols)
}

// evaluation scores the discriminator on validation rows against as many
// generated rows: d_loss, d_real and d_fake.
func (r *ganRecipe) evaluation() *evaluation {
	return &evaluation{Phase: r.evalPhase, Names: []string{"d_loss", "d_real", "d_fake"},
		Trim: func(rows int) int { return rows - rows%r.c.Pack },
		Fill: func(p *engine.Program, x []float32, labels []int, rows int, rng *rand.Rand) {
			r.fillReal(p, x, labels)
			r.fillCommon(p, rows, rng)
		},
		Read: func(p *engine.Program, loss float64, dst []float64) []float64 {
			return append(dst, loss, r.outputMean(output(p, 0, &r.evalOut[0])), r.outputMean(output(p, 1, &r.evalOut[1])))
		}}
}

func (r *ganRecipe) optimizers() map[string]optim.Optimizer {
	return map[string]optim.Optimizer{generatorOptimizer: r.genOpt, discriminatorOptimizer: r.discOpt}
}

// warnMemory is a recipe that spaces its warnings out and must learn,
// on resuming, when it last raised each kind.
type warnMemory interface {
	remember(ws []Warning)
}

func (r *ganRecipe) remember(ws []Warning) {
	for _, w := range ws {
		r.warned[w.Kind] = w.Step
	}
}

func (r *ganRecipe) state() any { return ganState{Steps: r.steps, Winning: r.winning} }

func (r *ganRecipe) restore(raw []byte) error {
	var s ganState
	if err := json.Unmarshal(raw, &s); err != nil {
		return fmt.Errorf("GAN training state: %w", err)
	}
	if s.Steps < 0 || s.Winning < 0 {
		return fmt.Errorf("GAN training state: %d steps, %d winning", s.Steps, s.Winning)
	}
	r.steps, r.winning = s.Steps, s.Winning
	return nil
}

func (r *ganRecipe) release() {
	for _, ph := range []*engine.Phase{r.dPhase, r.gPhase, r.evalPhase} {
		if ph != nil {
			ph.Close()
		}
	}
	r.dPhase, r.gPhase, r.evalPhase, r.dMove.Phase, r.gMove.Phase = nil, nil, nil, nil, nil
}
