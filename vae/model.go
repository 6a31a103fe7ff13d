package vae

import (
	"fmt"
	"github.com/quernlab/quern/data"
	"math/rand/v2"
	"sync/atomic"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/internal/scratch"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/layers"
)

// Kind is the model-file kind of a VAE.
const Kind = "vae"

// LogVarName is the name of the learned likelihood log-variance.
const LogVarName = "likelihood.logvar"

// Model is a variational autoencoder: a Gaussian encoder q(z|x) with mean
// and log-variance heads, a decoder p(x|z), the prior N(0, I), the input
// scaler fitted at training time, and (for learned Gaussian likelihoods)
// the decoder's log-variance. It holds no training state: package train
// trains it.
//
// Inference methods run without a graph and are safe for concurrent use by
// many goroutines while nobody trains the model.
type Model struct {
	cfg     Config
	Encoder *layers.MLP // Inputs -> ... -> 2*Latent (means, then log-variances)
	Decoder *layers.MLP // Latent -> ... -> Inputs (logits or means)
	// LogVar is the learned log-variance of a Gaussian likelihood: 1 x
	// Inputs (GaussianLearned) or 1 x 1 (GaussianShared); nil otherwise.
	LogVar *layers.Param
	// Fitted holds the input scaler fitted at training time and the schema.
	data.Fitted
	// Threshold, when calibrated, flags rows whose negative ELBO exceeds
	// it (see Calibrate and Score).
	Threshold *anomaly.Threshold
	// MissingCost is what a missing cell of each of the encoding's
	// columns costs a row's likelihood, in nats (see FitMissingCost and
	// the table likelihood in table.go); nil: nothing.
	MissingCost []float64
	// Marginals, when fitted (FitMarginals), maps a table model's samples
	// onto the training rows' distribution of each column; nil: none.
	Marginals *Marginals

	pool scratch.Pool[work]
	// tab caches the table likelihood (see table) with what it was read
	// from
	tab atomic.Pointer[tableCache]
}

// New builds an untrained model from cfg with weights drawn from cfg.Seed.
func New(cfg Config) (*Model, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg = cfg.withDefaults()
	initRNG := rand.New(rand.NewPCG(cfg.Seed, stream.Init))
	m := &Model{cfg: cfg, pool: scratch.Pool[work]{New: newWork}}
	var err error
	m.Encoder, err = layers.NewMLP(cfg.net("encoder"), initRNG)
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	m.Decoder, err = layers.NewMLP(cfg.net("decoder"), initRNG)
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	if r, c := cfg.logVarShape(); r > 0 {
		m.LogVar = layers.NewParam(LogVarName, r, c, cfg.Precision)
	}
	return m, nil
}

func (c Config) paramShapes() []layers.ParamShape {
	s := append(c.net("encoder").ParamShapes(), c.net("decoder").ParamShapes()...)
	if r, k := c.logVarShape(); r > 0 {
		s = append(s, layers.ParamShape{Name: LogVarName, Rows: r, Cols: k})
	}
	return s
}

// Config returns the configuration with defaults filled in.
func (m *Model) Config() Config { return m.cfg }

// Kind is "vae".
func (m *Model) Kind() string { return Kind }

// Width is the number of values in a row the model reads and writes.
func (m *Model) Width() int { return m.cfg.Inputs }

// CodeWidth is the latent dimension: the width of Encode's rows.
func (m *Model) CodeWidth() int { return m.cfg.Latent }

// Params lists every parameter: encoder, decoder, then the likelihood's.
func (m *Model) Params() []*layers.Param {
	ps := append(m.Encoder.Params(), m.Decoder.Params()...)
	if m.LogVar != nil {
		ps = append(ps, m.LogVar)
	}
	return ps
}

// Networks lists the encoder and the decoder.
func (m *Model) Networks() []*layers.MLP { return []*layers.MLP{m.Encoder, m.Decoder} }
