package vae

import (
	"context"
	"fmt"
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

// Model is a variational autoencoder: a Gaussian encoder q(z|x) with mean
// and log-variance heads, a decoder p(x|z), the prior N(0, I), the input
// scaler fitted at training time, and (for learned Gaussian likelihoods)
// the decoder's log-variance.
//
// Inference methods run without a graph and are safe for concurrent use by
// many goroutines while nobody trains the model; Train is not.
type Model struct {
	cfg     Config
	Encoder *layers.MLP // Inputs -> ... -> 2*Latent (means, then log-variances)
	Decoder *layers.MLP // Latent -> ... -> Inputs (logits or means)
	// LogVar is the learned log-variance of a Gaussian likelihood: 1 x
	// Inputs (GaussianLearned) or 1 x 1 (GaussianShared); nil otherwise.
	LogVar *layers.Param
	Scaler *data.Scaler
	// Threshold, when calibrated, flags rows whose negative ELBO exceeds
	// it (see Calibrate and Score).
	Threshold *anomaly.Threshold
	Columns   []string
	// Image is the image shape of the training data, if any.
	Image []int

	noisePCG, shufflePCG *rand.PCG
	noise, shuffle       *rand.Rand
	opt                  optim.Optimizer
	trainPhase           *engine.Phase
	evalPhase            *engine.Phase
	metrics              []train.Metric
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
	encW := append(append([]int{cfg.Inputs}, cfg.Hidden...), 2*cfg.Latent)
	decW := append([]int{cfg.Latent}, reverse(cfg.Hidden)...)
	decW = append(decW, cfg.Inputs)
	var err error
	m.Encoder, err = layers.NewMLP(layers.MLPConfig{Name: "encoder", Widths: encW, Hidden: cfg.Activation, LinearHidden: cfg.Linear, Precision: cfg.Precision}, initRNG)
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	m.Decoder, err = layers.NewMLP(layers.MLPConfig{Name: "decoder", Widths: decW, Hidden: cfg.Activation, LinearHidden: cfg.Linear, Precision: cfg.Precision}, initRNG)
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	switch cfg.Likelihood {
	case GaussianLearned:
		m.LogVar = layers.NewParam("likelihood.logvar", 1, cfg.Inputs, cfg.Precision)
	case GaussianShared:
		m.LogVar = layers.NewParam("likelihood.logvar", 1, 1, cfg.Precision)
	}
	m.noisePCG, m.shufflePCG = rand.NewPCG(cfg.Seed, 2), rand.NewPCG(cfg.Seed, 1)
	m.noise, m.shuffle = rand.New(m.noisePCG), rand.New(m.shufflePCG)
	m.opt, err = optim.NewAdamW(optim.AdamConfig{Rate: cfg.Rate, WeightDecay: cfg.WeightDecay, Schedule: cfg.RateSchedule})
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	return m, nil
}

func reverse(s []int) []int {
	r := make([]int, len(s))
	for i, v := range s {
		r[len(s)-1-i] = v
	}
	return r
}

// Config returns the configuration with defaults filled in.
func (m *Model) Config() Config { return m.cfg }

// Params lists every parameter: encoder, decoder, then the likelihood's.
func (m *Model) Params() []*layers.Param {
	ps := append(m.Encoder.Params(), m.Decoder.Params()...)
	if m.LogVar != nil {
		ps = append(ps, m.LogVar)
	}
	return ps
}

// Reparameterise returns z = mu + exp(logvar/2) * eps, the reparameterised
// sample through which gradients reach mu and logvar (eps is an input),
// as one fused operation.
func Reparameterise(g *engine.Graph, mu, logvar, eps *engine.Node) *engine.Node {
	return g.Reparameterise(mu, logvar, eps)
}

// reconstruction builds the per-row negative log-likelihood, averaged over
// rows, of x under the decoder output out.
func (m *Model) reconstruction(g *engine.Graph, out, x *engine.Node) *engine.Node {
	c := m.cfg
	switch c.Likelihood {
	case Gaussian:
		return losses.GraphGaussianNLLFixed(g, x, out, c.OutputVariance)
	case GaussianLearned:
		return losses.GraphGaussianNLLColumns(g, x, out, g.Param(m.LogVar))
	case GaussianShared:
		return losses.GraphGaussianNLLShared(g, x, out, g.Param(m.LogVar))
	}
	// one fused sum: no element-wise losses, no broadcast gradient
	return losses.GraphBernoulliNLL(g, out, x)
}

func (m *Model) build(trainMode bool) engine.BuildFunc {
	c := m.cfg
	L := c.Latent
	return func(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
		x := g.Input("x", n, c.Inputs)
		eps := g.Input("eps", n, L)
		h := g.MLP(m.Encoder, x, trainMode)
		mu, lv := g.Slice(h, 0, L), g.Slice(h, L, 2*L)
		z := Reparameterise(g, mu, lv, eps)
		out := g.MLP(m.Decoder, z, trainMode)
		recon := m.reconstruction(g, out, x)
		kl := losses.GraphKLStdNormal(g, mu, lv)
		if !trainMode {
			return g.Add(recon, kl), []*engine.Node{recon, kl}
		}
		klTerm := kl
		if c.FreeBits > 0 {
			klTerm = losses.GraphKLFreeBits(g, mu, lv, c.FreeBits)
		}
		beta := g.Input("beta", 1, 1)
		return g.Add(recon, g.Mul(klTerm, g.Sum(beta))), []*engine.Node{recon, kl}
	}
}

// Beta returns the KL weight the next training update will use.
func (m *Model) Beta() float64 { return m.cfg.Beta * m.cfg.Schedule.Factor(m.opt.Steps()) }

func (m *Model) fill(p *engine.Program, x []float32, rng *rand.Rand, beta float64) {
	if m.cfg.Precision == layers.Float64 {
		x64 := p.Input64("x")
		for i, v := range x {
			x64[i] = float64(v)
		}
		for i, e := 0, p.Input64("eps"); i < len(e); i++ {
			e[i] = rng.NormFloat64()
		}
		if b := p.Input64("beta"); b != nil {
			b[0] = beta
		}
		return
	}
	copy(p.Input32("x"), x)
	for i, e := 0, p.Input32("eps"); i < len(e); i++ {
		e[i] = float32(rng.NormFloat64())
	}
	if b := p.Input32("beta"); b != nil {
		b[0] = float32(beta)
	}
}

func (m *Model) out(p *engine.Program, i int) float64 {
	if m.cfg.Precision == layers.Float64 {
		return p.Output64(i)[0]
	}
	return float64(p.Output32(i)[0])
}

type trainee struct{ m *Model }

func (t trainee) Params() []*layers.Param { return t.m.Params() }

func (t trainee) Step(ctx context.Context, b train.Batch) ([]train.Metric, error) {
	m := t.m
	p, err := m.trainPhase.Program(b.Rows)
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	beta := m.Beta()
	m.fill(p, b.X, m.noise, beta)
	loss, err := p.Run(engine.RunOptions{})
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	if m.cfg.ClipNorm > 0 {
		optim.ClipGlobalNorm(p.Params(), m.cfg.ClipNorm)
	}
	if err := m.opt.Update(p.Params()); err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	m.metrics = append(m.metrics[:0],
		train.Metric{Name: "loss", Value: loss},
		train.Metric{Name: "reconstruction", Value: m.out(p, 0)},
		train.Metric{Name: "kl", Value: m.out(p, 1)},
		train.Metric{Name: "beta", Value: beta})
	return m.metrics, nil
}

const evalBatch = 256

// Evaluate returns the negative ELBO (beta 1, no free bits) with its
// reconstruction and KL parts on d (already scaled), each averaged per row,
// with one reparameterised sample per row drawn from a generator seeded
// afresh on every call, so repeated evaluations agree.
func (t trainee) Evaluate(d *data.Dataset) ([]train.Metric, error) {
	m := t.m
	rng := rand.New(rand.NewPCG(m.cfg.Seed, 3))
	var loss, rec, kl float64
	for start := 0; start < d.Rows; start += evalBatch {
		n := min(evalBatch, d.Rows-start)
		p, err := m.evalPhase.Program(n)
		if err != nil {
			return nil, fmt.Errorf("vae: %w", err)
		}
		m.fill(p, d.X[start*d.Cols:(start+n)*d.Cols], rng, 1)
		l, err := p.Run(engine.RunOptions{})
		if err != nil {
			return nil, fmt.Errorf("vae: evaluation: %w", err)
		}
		loss += l * float64(n)
		rec += m.out(p, 0) * float64(n)
		kl += m.out(p, 1) * float64(n)
	}
	r := float64(d.Rows)
	return []train.Metric{{Name: "loss", Value: loss / r}, {Name: "reconstruction", Value: rec / r}, {Name: "kl", Value: kl / r}}, nil
}

// Train fits the input scaler (unless the model has one), checks that
// Bernoulli data lies in [0, 1], and trains through the shared loop.
// Metrics: loss (the training objective), reconstruction, kl and beta;
// validation reports the negative ELBO as its loss.
func (m *Model) Train(ctx context.Context, trainSet, valSet *data.Dataset, cfg train.Config) (*train.History, error) {
	if trainSet == nil || trainSet.Cols != m.cfg.Inputs {
		return nil, fmt.Errorf("vae: training data must have %d columns", m.cfg.Inputs)
	}
	if valSet != nil && valSet.Cols != m.cfg.Inputs {
		return nil, fmt.Errorf("vae: validation data has %d columns, want %d", valSet.Cols, m.cfg.Inputs)
	}
	if m.Scaler == nil {
		s, err := data.Fit(m.cfg.Scaling, trainSet)
		if err != nil {
			return nil, fmt.Errorf("vae: %w", err)
		}
		m.Scaler = s
	}
	if m.Columns == nil {
		m.Columns, m.Image = trainSet.Columns, trainSet.Image
	}
	tr, err := m.Scaler.Apply(trainSet)
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	var va *data.Dataset
	if valSet != nil {
		if va, err = m.Scaler.Apply(valSet); err != nil {
			return nil, fmt.Errorf("vae: %w", err)
		}
	}
	if m.cfg.Likelihood == Bernoulli {
		for _, d := range []*data.Dataset{tr, va} {
			if d == nil {
				continue
			}
			for i, v := range d.X {
				if v < 0 || v > 1 {
					return nil, fmt.Errorf("vae: row %d column %d is %v after scaling; a Bernoulli likelihood needs values in [0, 1]", i/d.Cols+1, i%d.Cols+1, v)
				}
			}
		}
	}
	if m.trainPhase == nil {
		m.trainPhase = engine.NewPhase(m.cfg.Precision, true, m.build(true))
		m.evalPhase = engine.NewPhase(m.cfg.Precision, false, m.build(false))
	}
	return train.Run(ctx, trainee{m}, tr, va, cfg, m.shuffle)
}

// Release frees the training graphs.
func (m *Model) Release() {
	if m.trainPhase != nil {
		m.trainPhase.Close()
		m.evalPhase.Close()
		m.trainPhase, m.evalPhase = nil, nil
	}
}
