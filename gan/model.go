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
	powerV []float64       // PowerIteration's scratch vector
	specW  []*layers.Param // spectralWeights
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
	m.Generator, err = layers.NewMLP(cfg.net("generator"), initRNG)
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	m.Discriminator, err = layers.NewMLP(cfg.net("discriminator"), initRNG)
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	for _, c := range m.Discriminator.Front {
		m.specW = append(m.specW, c.W)
	}
	for _, d := range m.Discriminator.Layers {
		m.specW = append(m.specW, d.W)
	}
	ws := m.spectralWeights()
	m.SpectralScale = make([]float64, len(ws))
	for i := range m.SpectralScale {
		m.SpectralScale[i] = 1
	}
	if cfg.SpectralNorm {
		for _, w := range ws {
			_, cols := w.Shape()
			u := make([]float64, cols)
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
	return append(c.net("generator").ParamShapes(), c.net("discriminator").ParamShapes()...)
}

// spectralWeights lists the discriminator's weights in the order of
// SpectralU and SpectralScale: its convolutions', then its dense layers'.
func (m *Model) spectralWeights() []*layers.Param { return m.specW }

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
	for l, w := range m.spectralWeights() {
		u := m.SpectralU[l]
		// a dense layer's weights are In x Out (the layer computes x W), a
		// convolution's OutC x K: either way the matrix whose largest
		// singular value is sought, of rows x cols
		rows, cols := w.Shape()
		m.powerV = scratch.Grow(m.powerV, rows)
		v := m.powerV
		for i := 0; i < rows; i++ {
			var s float64
			for j := 0; j < cols; j++ {
				s += w.At(i*cols+j) * u[j]
			}
			v[i] = s
		}
		normalise(v)
		var sigma float64
		for j := 0; j < cols; j++ {
			var s float64
			for i := 0; i < rows; i++ {
				s += w.At(i*cols+j) * v[i]
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
