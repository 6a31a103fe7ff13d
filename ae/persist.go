package ae

import (
	"encoding/json"
	"fmt"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/modelfile"
)

// meta is the autoencoder's part of a model file's metadata.
type meta struct {
	Config     Config                `json:"config"`
	Scaler     *data.Scaler          `json:"scaler,omitempty"`
	Threshold  *anomaly.Threshold    `json:"threshold,omitempty"`
	Columns    []string              `json:"columns,omitempty"`
	Image      []int                 `json:"image,omitempty"`
	Provenance *modelfile.Provenance `json:"provenance,omitempty"`
}

// File converts the model to a model file, with prov (may be nil) as its
// provenance section.
func (m *Model) File(prov *modelfile.Provenance) (*modelfile.File, error) {
	md := meta{Config: m.cfg, Scaler: m.Scaler, Threshold: m.Threshold, Columns: m.Columns, Image: m.Image, Provenance: prov}
	b, err := json.Marshal(md)
	if err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	return &modelfile.File{Kind: Kind, Meta: b, Tensors: modelfile.FromParams(m.Params())}, nil
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
		return nil, fmt.Errorf("ae: %w", err)
	}
	if err := md.Config.Validate(); err != nil {
		return nil, err
	}
	cfg := md.Config.withDefaults()
	if err := f.CheckShapes(cfg.paramShapes(), cfg.Precision); err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	if md.Scaler != nil {
		if err := md.Scaler.Validate(cfg.Inputs); err != nil {
			return nil, fmt.Errorf("ae: %w", err)
		}
	}
	m, err := New(cfg)
	if err != nil {
		return nil, err
	}
	if err := f.SetParams(m.Params()); err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	if err := f.CheckNoExtra(m.Params()); err != nil {
		return nil, fmt.Errorf("ae: %w", err)
	}
	m.Scaler, m.Threshold, m.Columns, m.Image = md.Scaler, md.Threshold, md.Columns, md.Image
	return m, nil
}

// Load reads a model file written by Save (or a checkpoint, whose
// training state is then ignored).
func Load(path string) (*Model, error) {
	f, err := modelfile.Read(path, 0)
	if err != nil {
		return nil, err
	}
	return FromFile(f)
}
