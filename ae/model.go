package ae

import (
	"fmt"
	"github.com/quernlab/quern/data"
	"math/rand/v2"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/internal/scratch"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/layers"
)

// Kind is the model-file kind of an autoencoder.
const Kind = "ae"

// Model is an autoencoder: encoder, decoder, an optional classification
// head, the input scaler fitted at training time, an optional anomaly
// threshold and the names of its columns. It holds no training state:
// package train trains it.
//
// Inference methods (Encode, Decode, Reconstruct, RowErrors,
// Contributions, Score, Classify) run without a graph and are safe for
// concurrent use by many goroutines, as long as no goroutine is training
// or changing the model at the same time.
type Model struct {
	cfg     Config
	Encoder *layers.MLP
	Decoder *layers.MLP
	Head    *layers.MLP
	// Fitted holds the input scaler fitted at training time and the names
	// of the columns (which name the features behind a score).
	data.Fitted
	Threshold *anomaly.Threshold
	// Profile, when set (FitProfile), is the score's model of normal
	// codes and residuals.
	Profile *Profile

	pool scratch.Pool[work]
}

// New builds an untrained model from cfg with weights drawn from cfg.Seed.
func New(cfg Config) (*Model, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg = cfg.withDefaults()
	initRNG := rand.New(rand.NewPCG(cfg.Seed, stream.Init))
	m := &Model{cfg: cfg}
	var err error
	m.Encoder, err = layers.NewMLP(cfg.net("encoder"), initRNG)
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	m.Decoder, err = layers.NewMLP(cfg.net("decoder"), initRNG)
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	if cfg.Classes > 0 {
		m.Head, err = layers.NewMLP(layers.MLPConfig{Name: "head", Widths: cfg.headWidths(), Hidden: cfg.Activation, LinearHidden: cfg.Linear,
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
	return m, nil
}

// paramShapes lists the parameters New makes for cfg (defaults filled in).
func (c Config) paramShapes() []layers.ParamShape {
	s := append(c.net("encoder").ParamShapes(), c.net("decoder").ParamShapes()...)
	if c.Classes > 0 {
		s = append(s, layers.MLPShapes("head", c.headWidths())...)
	}
	return s
}

// Config returns the model's configuration with defaults filled in.
func (m *Model) Config() Config { return m.cfg }

// Kind is "ae".
func (m *Model) Kind() string { return Kind }

// Width is the number of values in a row the model reads.
func (m *Model) Width() int { return m.cfg.Inputs }

// CodeWidth is the number of values in a code.
func (m *Model) CodeWidth() int { return m.cfg.Latent }

// Classes is the number of classes of the classification head (0
// without one).
func (m *Model) Classes() int { return m.cfg.Classes }

// Params lists every parameter: encoder, decoder, then head.
func (m *Model) Params() []*layers.Param {
	ps := append(m.Encoder.Params(), m.Decoder.Params()...)
	if m.Head != nil {
		ps = append(ps, m.Head.Params()...)
	}
	return ps
}

// Networks lists the encoder, the decoder and the head if there is one.
func (m *Model) Networks() []*layers.MLP {
	n := []*layers.MLP{m.Encoder, m.Decoder}
	if m.Head != nil {
		n = append(n, m.Head)
	}
	return n
}
