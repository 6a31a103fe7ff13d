package gan

import (
	"encoding/json"
	"fmt"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/modelfile"
)

// meta is the GAN's part of a model file's metadata.
type meta struct {
	Config     Config                `json:"config"`
	Scaler     *data.Scaler          `json:"scaler,omitempty"`
	Columns    []string              `json:"columns,omitempty"`
	Image      []int                 `json:"image,omitempty"`
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
	md := meta{Config: m.cfg, Scaler: m.Scaler, Columns: m.Columns, Image: m.Image, Provenance: prov}
	b, err := json.Marshal(md)
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	f := &modelfile.File{Kind: Kind, Meta: b, Tensors: modelfile.FromParams(m.Params())}
	for i, u := range m.SpectralU {
		f.Tensors = append(f.Tensors, modelfile.Tensor{Name: fmt.Sprintf("%s%d", SpectralPrefix, i), Rows: 1, Cols: len(u), F64: append([]float64(nil), u...)})
	}
	if m.SpectralU != nil {
		f.Tensors = append(f.Tensors, modelfile.Tensor{Name: SpectralScaleName, Rows: 1, Cols: len(m.SpectralScale), F64: append([]float64(nil), m.SpectralScale...)})
	}
	return f, nil
}

// Save writes the model to path atomically.
func (m *Model) Save(path string, prov *modelfile.Provenance) error {
	f, err := m.File(prov)
	if err != nil {
		return err
	}
	return modelfile.Write(path, f)
}

// FromFile rebuilds a model from a model file (or a checkpoint, whose
// training state it ignores). The settings are checked against the
// tensors the file holds before anything is built.
func FromFile(f *modelfile.File) (*Model, error) {
	var md meta
	if err := f.Header(Kind, &md); err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	if err := md.Config.Validate(); err != nil {
		return nil, err
	}
	cfg := md.Config.withDefaults()
	if err := f.CheckShapes(cfg.paramShapes(), cfg.Precision); err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	if md.Scaler != nil {
		if err := md.Scaler.Validate(cfg.Outputs); err != nil {
			return nil, fmt.Errorf("gan: %w", err)
		}
	}
	m, err := New(cfg)
	if err != nil {
		return nil, err
	}
	if err := f.SetParams(m.Params()); err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	if err := f.CheckNoExtra(m.Params(), SpectralPrefix); err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	for i := range m.SpectralU {
		t, ok := f.Tensor(fmt.Sprintf("%s%d", SpectralPrefix, i))
		if !ok || t.F64 == nil || len(t.F64) != len(m.SpectralU[i]) {
			return nil, fmt.Errorf("gan: model file lacks spectral state %d", i)
		}
		copy(m.SpectralU[i], t.F64)
	}
	if cfg.SpectralNorm {
		t, ok := f.Tensor(SpectralScaleName)
		if !ok || t.F64 == nil || len(t.F64) != len(m.SpectralScale) {
			return nil, fmt.Errorf("gan: model file lacks the spectral scales")
		}
		copy(m.SpectralScale, t.F64)
	}
	m.Scaler, m.Columns, m.Image = md.Scaler, md.Columns, md.Image
	return m, nil
}

// Load reads a model file written by Save (or a checkpoint).
func Load(path string) (*Model, error) {
	f, err := modelfile.Read(path, 0)
	if err != nil {
		return nil, err
	}
	return FromFile(f)
}
