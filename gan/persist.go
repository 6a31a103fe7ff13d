package gan

import (
	"fmt"
	"github.com/quernlab/quern/data"

	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/modelfile"
)

// meta is the GAN's part of a model file's metadata.
type meta struct {
	Config Config `json:"config"`
	data.Fitted
	Provenance *modelfile.Provenance `json:"provenance,omitempty"`
}

// Tensor names of the spectral normalisation state: SpectralPrefix+"<layer>"
// holds a layer's power-iteration vector, SpectralScaleName the scales.
const (
	SpectralPrefix    = "spectral/"
	SpectralScaleName = SpectralPrefix + "inv_sigma"
)

// File converts the model to a model file, with prov (may be nil) as its
// provenance section.
func (m *Model) File(prov *modelfile.Provenance) (*modelfile.File, error) {
	var extra []modelfile.Tensor
	for i, u := range m.SpectralU {
		extra = append(extra, modelfile.Tensor{Name: fmt.Sprintf("%s%d", SpectralPrefix, i), Rows: 1, Cols: len(u), F64: append([]float64(nil), u...)})
	}
	if m.SpectralU != nil {
		extra = append(extra, modelfile.Tensor{Name: SpectralScaleName, Rows: 1, Cols: len(m.SpectralScale), F64: append([]float64(nil), m.SpectralScale...)})
	}
	f, err := modelio.File(Kind, meta{m.cfg, m.Fitted, prov}, m.Params(), extra...)
	if err == nil && len(m.cfg.Categories) > 0 {
		// builds that predate categories would write their logits as
		// samples: they refuse version 2
		f.Version = 2
	}
	return f, err
}

// The loader's view of the metadata.
func (md *meta) Settings() *Config  { return &md.Config }
func (md *meta) Data() *data.Fitted { return &md.Fitted }

// Apply gives a loaded GAN its rows and the spectral normalisation state
// the file holds.
func (md *meta) Apply(m *Model, f *modelfile.File) error {
	for i := range m.SpectralU {
		t, ok := f.Tensor(fmt.Sprintf("%s%d", SpectralPrefix, i))
		if !ok || t.F64 == nil || len(t.F64) != len(m.SpectralU[i]) {
			return fmt.Errorf("gan: model file lacks spectral state %d", i)
		}
		copy(m.SpectralU[i], t.F64)
	}
	if m.cfg.SpectralNorm {
		t, ok := f.Tensor(SpectralScaleName)
		if !ok || t.F64 == nil || len(t.F64) != len(m.SpectralScale) {
			return fmt.Errorf("gan: model file lacks the spectral scales")
		}
		copy(m.SpectralScale, t.F64)
	}
	m.Fitted = md.Fitted
	return nil
}

// loader opens GAN model files; the spectral state is tensors of its own.
var loader = modelio.Kind[Config, *Model]{Name: Kind, Build: New, Allowed: []string{SpectralPrefix},
	Resolve: func(c Config) (Config, modelio.Spec, error) {
		if err := c.Validate(); err != nil {
			return c, modelio.Spec{}, err
		}
		c = c.withDefaults()
		return c, modelio.Spec{Shapes: c.paramShapes(), Precision: c.Precision, Width: c.Outputs}, nil
	}}

// Save writes the model to path atomically.
func (m *Model) Save(path string, prov *modelfile.Provenance) error {
	return modelio.Save(path, m, prov)
}

// FromFile rebuilds a model from a model file (or a checkpoint, whose
// training state it ignores). The settings are checked against the
// tensors the file holds before anything is built.
func FromFile(f *modelfile.File) (*Model, error) { return modelio.Load(loader, f, &meta{}) }

// Load reads a model file written by Save (or a checkpoint, whose
// training state is then ignored).
func Load(path string) (*Model, error) { return modelio.Open(path, FromFile) }
