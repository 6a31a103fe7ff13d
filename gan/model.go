package gan

import (
	"fmt"
	"github.com/quernlab/quern/data"
	"math"
	"math/rand/v2"

	"github.com/quernlab/quern/internal/scratch"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/layers"
)

// Kind is the model-file kind of a GAN.
const Kind = "gan"

// Model is a GAN: generator, discriminator (or critic), the data scaler
// fitted at training time, and the state of spectral normalisation. It
// holds no training state: package train trains it.
//
// Generate, Sample and Discriminate run without a graph and are safe for
// concurrent use while nobody trains the model.
type Model struct {
	cfg           Config
	Generator     *layers.MLP // Noise (+Classes) -> ... -> Outputs
	Discriminator *layers.MLP // Pack*(Outputs+Classes) -> ... -> 1
	// Fitted holds the data scaler fitted at training time and the schema.
	data.Fitted
	// SpectralU holds the power-iteration vector of each discriminator
	// layer (nil without spectral normalisation).
	SpectralU [][]float64
	// SpectralScale is 1/sigma for each discriminator layer, sigma the
	// estimate of its weight's largest singular value (1 without spectral
	// normalisation): the layer computes x (W SpectralScale) + b.
	SpectralScale []float64

	pool   scratch.Pool[work]
	powerV []float64 // PowerIteration's scratch vector
}

// New builds an untrained model with weights drawn from cfg.Seed.
func New(cfg Config) (*Model, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg = cfg.withDefaults()
	initRNG := rand.New(rand.NewPCG(cfg.Seed, stream.Init))
	m := &Model{cfg: cfg, pool: scratch.Pool[work]{New: newWork}}
	var err error
	m.Generator, err = layers.NewMLP(layers.MLPConfig{Name: "generator", Widths: cfg.generatorWidths(), Hidden: cfg.Activation, LeakySlope: cfg.LeakySlope, Output: cfg.GenOutput, Precision: cfg.Precision}, initRNG)
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	m.Discriminator, err = layers.NewMLP(layers.MLPConfig{Name: "discriminator", Widths: cfg.discriminatorWidths(), Hidden: cfg.Activation, LeakySlope: cfg.LeakySlope, Precision: cfg.Precision}, initRNG)
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	m.SpectralScale = make([]float64, len(m.Discriminator.Layers))
	for i := range m.SpectralScale {
		m.SpectralScale[i] = 1
	}
	if cfg.SpectralNorm {
		for _, d := range m.Discriminator.Layers {
			u := make([]float64, d.Out)
			for i := range u {
				u[i] = initRNG.NormFloat64()
			}
			m.SpectralU = append(m.SpectralU, u)
		}
		m.PowerIteration()
	}
	return m, nil
}

func (c Config) paramShapes() []layers.ParamShape {
	return append(layers.MLPShapes("generator", c.generatorWidths()), layers.MLPShapes("discriminator", c.discriminatorWidths())...)
}

// Config returns the configuration with defaults filled in.
func (m *Model) Config() Config { return m.cfg }

// Kind is "gan".
func (m *Model) Kind() string { return Kind }

// Width is the number of values in a generated (or discriminated) row.
func (m *Model) Width() int { return m.cfg.Outputs }

// Params lists every parameter: generator, then discriminator.
func (m *Model) Params() []*layers.Param {
	return append(m.Generator.Params(), m.Discriminator.Params()...)
}

// Networks lists the generator and the discriminator.
func (m *Model) Networks() []*layers.MLP { return []*layers.MLP{m.Generator, m.Discriminator} }

// PowerIteration advances each discriminator layer's singular-vector
// estimate by one step and refreshes SpectralScale (Miyato et al. 2018,
// Algorithm 1); training calls it before every discriminator update.
// sigma is treated as a constant in the gradient. It is a training
// operation: it changes the model, so it must not run while other
// goroutines sample or score with it.
func (m *Model) PowerIteration() {
	for l, d := range m.Discriminator.Layers {
		u := m.SpectralU[l]
		w := d.W // In x Out; the layer computes x W
		m.powerV = scratch.Grow(m.powerV, d.In)
		v := m.powerV
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
			m.SpectralScale[l] = 1 / sigma
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

// Classes is the number of classes of a conditional model (0 otherwise).
func (m *Model) Classes() int { return m.cfg.Classes }
