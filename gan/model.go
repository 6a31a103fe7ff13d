package gan

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/optim"
	"github.com/quernlab/quern/train"
)

// Warning is an early sign of a failing run.
type Warning struct {
	Step    int
	Kind    string // "discriminator_wins" or "collapse"
	Message string
}

// Model is a GAN: generator, discriminator (or critic), the data scaler
// fitted at training time, and the state of spectral normalisation.
//
// Generate and Discriminate run without a graph and are safe for
// concurrent use while nobody trains the model; Train is not.
type Model struct {
	cfg           Config
	Generator     *layers.MLP // Noise (+Classes) -> ... -> Outputs
	Discriminator *layers.MLP // Pack*(Outputs+Classes) -> ... -> 1
	Scaler        *data.Scaler
	Columns       []string
	Image         []int
	// SpectralU holds the power-iteration vector of each discriminator
	// layer (nil without spectral normalisation).
	SpectralU [][]float64

	noisePCG, shufflePCG *rand.PCG
	noise, shuffle       *rand.Rand
	genOpt, discOpt      optim.Optimizer
	dPhase, gPhase       *engine.Phase
	evalPhase            *engine.Phase
	train                *data.Dataset
	dataSpread           float64
	invSigma             []float64
	steps                int
	winning              int
	warned               map[string]int
	warnings             []Warning
	metrics              []train.Metric
	bufs                 [4][]float64 // step outputs as float64: D real, D fake, G fake logits, G samples
	extra                []float32    // rows of the extra discriminator steps
	extraY               []int
	pool                 sync.Pool
}

// New builds an untrained model with weights drawn from cfg.Seed.
func New(cfg Config) (*Model, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg = cfg.withDefaults()
	initRNG := rand.New(rand.NewPCG(cfg.Seed, 0))
	m := &Model{cfg: cfg, warned: map[string]int{}}
	gw := append(append([]int{cfg.Noise + cfg.Classes}, cfg.GenHidden...), cfg.Outputs)
	dw := append(append([]int{cfg.Pack * (cfg.Outputs + cfg.Classes)}, cfg.DiscHidden...), 1)
	var err error
	m.Generator, err = layers.NewMLP(layers.MLPConfig{Name: "generator", Widths: gw, Hidden: cfg.Activation, LeakySlope: cfg.LeakySlope, Output: cfg.GenOutput, Precision: cfg.Precision}, initRNG)
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	m.Discriminator, err = layers.NewMLP(layers.MLPConfig{Name: "discriminator", Widths: dw, Hidden: cfg.Activation, LeakySlope: cfg.LeakySlope, Precision: cfg.Precision}, initRNG)
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	m.invSigma = make([]float64, len(m.Discriminator.Layers))
	for i := range m.invSigma {
		m.invSigma[i] = 1
	}
	if cfg.SpectralNorm {
		for _, d := range m.Discriminator.Layers {
			u := make([]float64, d.Out)
			for i := range u {
				u[i] = initRNG.NormFloat64()
			}
			m.SpectralU = append(m.SpectralU, u)
		}
	}
	m.noisePCG, m.shufflePCG = rand.NewPCG(cfg.Seed, 2), rand.NewPCG(cfg.Seed, 1)
	m.noise, m.shuffle = rand.New(m.noisePCG), rand.New(m.shufflePCG)
	m.genOpt, err = optim.NewAdam(optim.AdamConfig{Rate: cfg.GenRate, Beta1: cfg.Beta1, Beta2: cfg.Beta2, Schedule: cfg.RateSchedule})
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	m.discOpt, err = optim.NewAdam(optim.AdamConfig{Rate: cfg.DiscRate, Beta1: cfg.Beta1, Beta2: cfg.Beta2, Schedule: rateForD(cfg)})
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	if cfg.SpectralNorm {
		m.powerIteration()
	}
	return m, nil
}

// Config returns the configuration with defaults filled in.
func (m *Model) Config() Config { return m.cfg }

// Params lists every parameter: generator, then discriminator.
func (m *Model) Params() []*layers.Param {
	return append(m.Generator.Params(), m.Discriminator.Params()...)
}

// Warnings returns the warnings raised so far.
func (m *Model) Warnings() []Warning { return append([]Warning(nil), m.warnings...) }

// powerIteration advances each layer's singular-vector estimate by one
// step and refreshes 1/sigma (Miyato et al. 2018, Algorithm 1). sigma is
// treated as a constant in the gradient.
func (m *Model) powerIteration() {
	for l, d := range m.Discriminator.Layers {
		u := m.SpectralU[l]
		w := d.W // In x Out; the layer computes x W
		v := make([]float64, d.In)
		for i := 0; i < d.In; i++ {
			var s float64
			for j := 0; j < d.Out; j++ {
				s += w.At(i*d.Out+j) * u[j]
			}
			v[i] = s
		}
		normalise(v)
		var sigma float64
		for j := 0; j < d.Out; j++ {
			var s float64
			for i := 0; i < d.In; i++ {
				s += w.At(i*d.Out+j) * v[i]
			}
			u[j] = s
		}
		sigma = normalise(u)
		if sigma > 1e-12 {
			m.invSigma[l] = 1 / sigma
		}
	}
}

func normalise(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x * x
	}
	n := math.Sqrt(s)
	if n > 0 {
		for i := range v {
			v[i] /= n
		}
	}
	return n
}

// sigmaInputs declares one 1/sigma input per discriminator layer when
// spectral normalisation is on (nil otherwise).
func (m *Model) sigmaInputs(g *engine.Graph) []*engine.Node {
	if !m.cfg.SpectralNorm {
		return nil
	}
	s := make([]*engine.Node, len(m.Discriminator.Layers))
	for l := range s {
		s[l] = g.Sum(g.Input(sigmaName(l), 1, 1))
	}
	return s
}

// discriminate builds the discriminator's logits for inputs x (rows x
// Outputs) with one-hot labels y (nil when unconditional), packing Pack
// rows per decision; sig holds the spectral scales (see sigmaInputs).
func (m *Model) discriminate(g *engine.Graph, x, y *engine.Node, sig []*engine.Node) *engine.Node {
	c := m.cfg
	h := x
	if y != nil {
		h = g.Concat(x, y)
	}
	if c.Pack > 1 {
		h = g.Reshape(h, x.Rows()/c.Pack, c.Pack*(c.Outputs+c.Classes))
	}
	for l, d := range m.Discriminator.Layers {
		w := g.Param(d.W)
		if sig != nil {
			w = g.Mul(sig[l], w)
		}
		h = g.AffineAct(h, w, g.Param(d.B), d.Act, d.Slope)
	}
	return h
}

func (m *Model) generate(g *engine.Graph, n int) (fake, fakeY *engine.Node) {
	z := g.Input("noise", n, m.cfg.Noise)
	if m.cfg.Classes > 0 {
		fakeY = g.Input("fake_labels", n, m.cfg.Classes)
		z = g.Concat(z, fakeY)
	}
	return g.MLP(m.Generator, z, true), fakeY
}

func (m *Model) buildD(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
	c := m.cfg
	real := g.Input("real", n, c.Outputs)
	var realY *engine.Node
	if c.Classes > 0 {
		realY = g.Input("real_labels", n, c.Classes)
	}
	fake, fakeY := m.generate(g, n)
	sig := m.sigmaInputs(g)
	lr, lf := m.discriminate(g, real, realY, sig), m.discriminate(g, fake, fakeY, sig)
	var loss *engine.Node
	if c.Critic == Wasserstein {
		loss = losses.GraphWassersteinCritic(g, lr, lf)
	} else {
		loss = losses.GraphDiscriminatorBCE(g, lr, lf, 1-c.LabelSmoothing)
	}
	return loss, []*engine.Node{lr, lf}
}

func (m *Model) buildG(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
	c := m.cfg
	fake, fakeY := m.generate(g, n)
	lf := m.discriminate(g, fake, fakeY, m.sigmaInputs(g))
	var loss *engine.Node
	switch {
	case c.Critic == Wasserstein:
		loss = losses.GraphWassersteinGenerator(g, lf)
	case c.Loss == Minimax:
		loss = losses.GraphGeneratorMinimax(g, lf)
	default:
		loss = losses.GraphGeneratorNonSaturating(g, lf)
	}
	return loss, []*engine.Node{lf, fake}
}

// set writes float64 values into a program input of either precision.
func set(p *engine.Program, name string, f func(i int) float64) {
	if v := p.Input64(name); v != nil {
		for i := range v {
			v[i] = f(i)
		}
		return
	}
	v := p.Input32(name)
	for i := range v {
		v[i] = float32(f(i))
	}
}

// output returns program output i as float64, converting float32 values
// into *buf (grown once, then reused step after step).
func (m *Model) output(p *engine.Program, i int, buf *[]float64) []float64 {
	if m.cfg.Precision == layers.Float64 {
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

func (m *Model) fillCommon(p *engine.Program, n int, rng *rand.Rand, class int) {
	set(p, "noise", func(int) float64 { return rng.NormFloat64() })
	if m.cfg.Classes > 0 {
		k := m.cfg.Classes
		labels := make([]int, n)
		for r := range labels {
			if class >= 0 {
				labels[r] = class
			} else {
				labels[r] = rng.IntN(k)
			}
		}
		set(p, "fake_labels", func(i int) float64 { return b2f(labels[i/k] == i%k) })
	}
	for l, s := range m.invSigma {
		name := sigmaName(l)
		if p.HasInput(name) {
			set(p, name, func(int) float64 { return s })
		}
	}
}

// sigmaNames holds the names of the spectral-scale inputs, made once.
var sigmaNames = func() (n [16]string) {
	for l := range n {
		n[l] = fmt.Sprintf("invsigma.%d", l)
	}
	return
}()

// sigmaName is the input name of layer l's spectral scale.
func sigmaName(l int) string {
	if l < len(sigmaNames) {
		return sigmaNames[l]
	}
	return fmt.Sprintf("invsigma.%d", l)
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

func (m *Model) fillReal(p *engine.Program, x []float32, labels []int) {
	set(p, "real", func(i int) float64 { return float64(x[i]) })
	if m.cfg.Classes > 0 {
		k := m.cfg.Classes
		set(p, "real_labels", func(i int) float64 { return b2f(labels[i/k] == i%k) })
	}
}

// DiscriminatorStep updates the discriminator once on scaled real rows
// against as many generated rows, leaving the generator bitwise unchanged.
// It returns the loss and the real and generated logits.
func (m *Model) discriminatorStep(x []float32, labels []int, rows int) (float64, []float64, []float64, error) {
	if m.cfg.SpectralNorm {
		m.powerIteration()
	}
	p, err := m.dPhase.Program(rows)
	if err != nil {
		return 0, nil, nil, fmt.Errorf("gan: %w", err)
	}
	m.fillReal(p, x, labels)
	m.fillCommon(p, rows, m.noise, -1)
	loss, err := p.Run(engine.RunOptions{})
	if err != nil {
		return 0, nil, nil, fmt.Errorf("gan: discriminator: %w", err)
	}
	if err := m.discOpt.Update(p.Params()); err != nil {
		return 0, nil, nil, fmt.Errorf("gan: %w", err)
	}
	return loss, m.output(p, 0, &m.bufs[0]), m.output(p, 1, &m.bufs[1]), nil
}

func (m *Model) generatorStep(rows int) (float64, []float64, []float64, error) {
	p, err := m.gPhase.Program(rows)
	if err != nil {
		return 0, nil, nil, fmt.Errorf("gan: %w", err)
	}
	m.fillCommon(p, rows, m.noise, -1)
	loss, err := p.Run(engine.RunOptions{})
	if err != nil {
		return 0, nil, nil, fmt.Errorf("gan: generator: %w", err)
	}
	if err := m.genOpt.Update(p.Params()); err != nil {
		return 0, nil, nil, fmt.Errorf("gan: %w", err)
	}
	return loss, m.output(p, 0, &m.bufs[2]), m.output(p, 1, &m.bufs[3]), nil
}

func sigmoidMean(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += layers.Sigmoid.Eval(x, 0)
	}
	return s / float64(len(v))
}

// spread is the mean over columns of the standard deviation of rows.
func spread(x []float64, rows, cols int) float64 {
	var total float64
	for j := 0; j < cols; j++ {
		var m, s float64
		for r := 0; r < rows; r++ {
			m += x[r*cols+j]
		}
		m /= float64(rows)
		for r := 0; r < rows; r++ {
			d := x[r*cols+j] - m
			s += d * d
		}
		total += math.Sqrt(s / float64(max(rows-1, 1)))
	}
	return total / float64(cols)
}

func (m *Model) warn(kind, msg string) {
	if last, ok := m.warned[kind]; ok && m.steps-last < 500 {
		return
	}
	m.warned[kind] = m.steps
	w := Warning{Step: m.steps, Kind: kind, Message: msg}
	m.warnings = append(m.warnings, w)
	if m.cfg.Monitor.OnWarning != nil {
		m.cfg.Monitor.OnWarning(w)
	}
}

type trainee struct{ m *Model }

func (t trainee) Params() []*layers.Param { return t.m.Params() }

// Step runs DiscSteps discriminator updates (the first on the loop's
// batch, the others on rows drawn from the training set) and one generator
// update. Metrics: d_loss, g_loss, d_real (mean D(x)), d_fake (mean
// D(G(z))), d_accuracy and spread (generated spread over the data's).
func (t trainee) Step(ctx context.Context, b train.Batch) ([]train.Metric, error) {
	m := t.m
	c := m.cfg
	rows := b.Rows - b.Rows%c.Pack
	if rows == 0 {
		return m.metrics, nil // a final batch smaller than one pack
	}
	x, labels := b.X[:rows*c.Outputs], b.Labels
	var dLoss float64
	var lr, lf []float64
	var err error
	// rows for the extra discriminator steps, in buffers kept between steps
	var extra []float32
	var extraY []int
	if c.DiscSteps > 1 {
		if cap(m.extra) < rows*c.Outputs {
			m.extra, m.extraY = make([]float32, rows*c.Outputs), make([]int, rows)
		}
		extra, extraY = m.extra[:rows*c.Outputs], m.extraY[:rows]
		if c.Classes == 0 {
			extraY = nil
		}
	}
	for k := 0; k < c.DiscSteps; k++ {
		if k > 0 {
			for r := 0; r < rows; r++ {
				i := m.noise.IntN(m.train.Rows)
				copy(extra[r*c.Outputs:], m.train.Row(i))
				if extraY != nil {
					extraY[r] = m.train.Labels[i]
				}
			}
			x, labels = extra, extraY
		}
		dLoss, lr, lf, err = m.discriminatorStep(x, labels, rows)
		if err != nil {
			return nil, err
		}
	}
	gLoss, _, fake, err := m.generatorStep(rows)
	if err != nil {
		return nil, err
	}
	m.steps++
	correct := 0
	for _, v := range lr {
		if v > 0 {
			correct++
		}
	}
	for _, v := range lf {
		if v < 0 {
			correct++
		}
	}
	acc := float64(correct) / float64(len(lr)+len(lf))
	sp := spread(fake, rows, c.Outputs) / m.dataSpread
	if c.Critic == BCECritic {
		if acc > c.Monitor.WinningAccuracy {
			m.winning++
		} else {
			m.winning = 0
		}
		if m.winning >= c.Monitor.WinningSteps {
			m.warn("discriminator_wins", fmt.Sprintf("discriminator accuracy above %.2f for %d steps: the generator's gradient is vanishing", c.Monitor.WinningAccuracy, m.winning))
		}
	}
	if sp < c.Monitor.CollapseRatio {
		m.warn("collapse", fmt.Sprintf("generated spread is %.3f of the data's: samples are collapsing", sp))
	}
	if c.Monitor.SampleEvery > 0 && m.steps%c.Monitor.SampleEvery == 0 && c.Monitor.OnSamples != nil {
		if s, err := m.Generate(c.Monitor.SampleRows, uint64(m.steps), -1); err == nil {
			c.Monitor.OnSamples(m.steps, s)
		}
	}
	dReal, dFake := sigmoidMean(lr), sigmoidMean(lf)
	if c.Critic == Wasserstein {
		dReal, dFake = mean(lr), mean(lf)
	}
	m.metrics = append(m.metrics[:0],
		train.Metric{Name: "d_loss", Value: dLoss},
		train.Metric{Name: "g_loss", Value: gLoss},
		train.Metric{Name: "d_real", Value: dReal},
		train.Metric{Name: "d_fake", Value: dFake},
		train.Metric{Name: "d_accuracy", Value: acc},
		train.Metric{Name: "spread", Value: sp})
	return m.metrics, nil
}

func mean(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// Evaluate scores the discriminator on d (scaled) against as many fresh
// generated rows, from a generator seeded afresh on each call: d_loss,
// d_real and d_fake.
func (t trainee) Evaluate(d *data.Dataset) ([]train.Metric, error) {
	m := t.m
	c := m.cfg
	rng := rand.New(rand.NewPCG(c.Seed, 3))
	var loss, dr, df float64
	n := 0
	const batch = 256
	for start := 0; start+c.Pack <= d.Rows; start += batch {
		rows := min(batch, d.Rows-start)
		rows -= rows % c.Pack
		p, err := m.evalPhase.Program(rows)
		if err != nil {
			return nil, fmt.Errorf("gan: %w", err)
		}
		var lab []int
		if d.Labels != nil {
			lab = d.Labels[start : start+rows]
		}
		m.fillReal(p, d.X[start*c.Outputs:(start+rows)*c.Outputs], lab)
		m.fillCommon(p, rows, rng, -1)
		l, err := p.Run(engine.RunOptions{})
		if err != nil {
			return nil, fmt.Errorf("gan: evaluation: %w", err)
		}
		loss += l * float64(rows)
		var b0, b1 []float64
		dr += sigmoidMean(m.output(p, 0, &b0)) * float64(rows)
		df += sigmoidMean(m.output(p, 1, &b1)) * float64(rows)
		n += rows
	}
	if n == 0 {
		return nil, fmt.Errorf("gan: evaluation set smaller than one pack")
	}
	return []train.Metric{{Name: "d_loss", Value: loss / float64(n)}, {Name: "d_real", Value: dr / float64(n)}, {Name: "d_fake", Value: df / float64(n)}}, nil
}

// Train fits the data scaler (unless the model has one) and trains through
// the shared loop. Conditional models need a label on every row.
func (m *Model) Train(ctx context.Context, trainSet, valSet *data.Dataset, cfg train.Config) (*train.History, error) {
	c := m.cfg
	if err := m.prepare(trainSet, valSet); err != nil {
		return nil, err
	}
	if cfg.BatchSize == 0 {
		cfg.BatchSize = 64
	}
	if cfg.BatchSize%c.Pack != 0 {
		return nil, fmt.Errorf("gan: batch size %d is not a multiple of Pack %d", cfg.BatchSize, c.Pack)
	}
	var va *data.Dataset
	if valSet != nil {
		var err error
		if va, err = m.Scaler.Apply(valSet); err != nil {
			return nil, fmt.Errorf("gan: %w", err)
		}
	}
	return train.Run(ctx, trainee{m}, m.train, va, cfg, m.shuffle)
}

// prepare checks the data, fits the scaler, keeps a scaled copy of the
// training rows and builds the phases.
func (m *Model) prepare(trainSet, valSet *data.Dataset) error {
	c := m.cfg
	if trainSet == nil || trainSet.Cols != c.Outputs || trainSet.Rows == 0 {
		return fmt.Errorf("gan: training data must have %d columns", c.Outputs)
	}
	for _, d := range []*data.Dataset{trainSet, valSet} {
		if d == nil {
			continue
		}
		if d.Cols != c.Outputs {
			return fmt.Errorf("gan: data has %d columns, want %d", d.Cols, c.Outputs)
		}
		if c.Classes > 0 {
			if d.Labels == nil {
				return fmt.Errorf("gan: a conditional model needs labels")
			}
			for i, l := range d.Labels {
				if l < 0 || l >= c.Classes {
					return fmt.Errorf("gan: row %d has label %d, want 0..%d", i+1, l, c.Classes-1)
				}
			}
		}
	}
	if m.Scaler == nil {
		s, err := data.Fit(c.Scaling, trainSet)
		if err != nil {
			return fmt.Errorf("gan: %w", err)
		}
		m.Scaler = s
	}
	if m.Columns == nil {
		m.Columns, m.Image = trainSet.Columns, trainSet.Image
	}
	tr, err := m.Scaler.Apply(trainSet)
	if err != nil {
		return fmt.Errorf("gan: %w", err)
	}
	m.train = tr
	x := make([]float64, len(tr.X))
	for i, v := range tr.X {
		x[i] = float64(v)
	}
	m.dataSpread = math.Max(spread(x, tr.Rows, tr.Cols), 1e-12)
	if m.dPhase == nil {
		m.dPhase = engine.NewPhase(c.Precision, true, m.buildD).Only(m.Discriminator.Params())
		m.gPhase = engine.NewPhase(c.Precision, true, m.buildG).Only(m.Generator.Params())
		m.evalPhase = engine.NewPhase(c.Precision, false, m.buildD)
	}
	return nil
}

// Release frees the training graphs.
func (m *Model) Release() {
	for _, ph := range []*engine.Phase{m.dPhase, m.gPhase, m.evalPhase} {
		if ph != nil {
			ph.Close()
		}
	}
	m.dPhase, m.gPhase, m.evalPhase = nil, nil, nil
}

// rateForD stretches the schedule over the discriminator's DiscSteps
// updates per generator update, so both follow the same course.
func rateForD(c Config) optim.Schedule {
	if c.RateSchedule == nil || c.DiscSteps == 1 {
		return c.RateSchedule
	}
	return stretched{c.RateSchedule, c.DiscSteps}
}

type stretched struct {
	s optim.Schedule
	k int
}

func (s stretched) Factor(step int) float64 { return s.s.Factor(step / s.k) }
