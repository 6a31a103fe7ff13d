package vae

import (
	"fmt"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/persist"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
)

// Kind is the model-file kind of a VAE.
const Kind = "vae"

type meta struct {
	Config     Config                `json:"config"`
	Scaler     *data.Scaler          `json:"scaler,omitempty"`
	Threshold  *anomaly.Threshold    `json:"threshold,omitempty"`
	Columns    []string              `json:"columns,omitempty"`
	Image      []int                 `json:"image,omitempty"`
	Provenance *modelfile.Provenance `json:"provenance,omitempty"`
	Resume     *persist.Resume       `json:"resume,omitempty"`
}

const optimPrefix = "optimizer/"

// File converts the model to a model file; with history not nil it is a
// checkpoint that also holds the optimiser, generator states and history.
func (m *Model) File(prov *modelfile.Provenance, history *train.History) (*modelfile.File, error) {
	md := meta{Config: m.cfg, Scaler: m.Scaler, Threshold: m.Threshold, Columns: m.Columns, Image: m.Image, Provenance: prov}
	ts := persist.Params(m.Params())
	if history != nil {
		ots, r, err := persist.SaveTraining(m.opt, optimPrefix, m.noisePCG, m.shufflePCG, history)
		if err != nil {
			return nil, fmt.Errorf("vae: %w", err)
		}
		ts, md.Resume = append(ts, ots...), r
	}
	f, err := persist.Encode(Kind, md, ts)
	if err != nil {
		return nil, fmt.Errorf("vae: %w", err)
	}
	return f, nil
}

// Save writes the model (without training state) to path atomically.
func (m *Model) Save(path string, prov *modelfile.Provenance) error {
	f, err := m.File(prov, nil)
	if err != nil {
		return err
	}
	return modelfile.Write(path, f)
}

// FromFile rebuilds a model from a model file, restoring training state
// and returning the history when the file is a checkpoint.
func FromFile(f *modelfile.File) (*Model, *train.History, *modelfile.Provenance, error) {
	var md meta
	if err := persist.Decode(f, Kind, &md); err != nil {
		return nil, nil, nil, fmt.Errorf("vae: %w", err)
	}
	m, err := New(md.Config)
	if err != nil {
		return nil, nil, nil, err
	}
	if err := persist.SetParams(f, m.Params()); err != nil {
		return nil, nil, nil, fmt.Errorf("vae: %w", err)
	}
	if err := persist.CheckNoExtra(f, m.Params(), optimPrefix); err != nil {
		return nil, nil, nil, fmt.Errorf("vae: %w", err)
	}
	if md.Scaler != nil {
		if err := md.Scaler.Validate(md.Config.Inputs); err != nil {
			return nil, nil, nil, fmt.Errorf("vae: %w", err)
		}
	}
	m.Scaler, m.Threshold, m.Columns, m.Image = md.Scaler, md.Threshold, md.Columns, md.Image
	if md.Resume == nil {
		return m, nil, md.Provenance, nil
	}
	h, err := persist.LoadTraining(f, md.Resume, m.opt, optimPrefix, m.noisePCG, m.shufflePCG)
	if err != nil {
		return nil, nil, nil, fmt.Errorf("vae: %w", err)
	}
	return m, h, md.Provenance, nil
}

// Load reads a model file written by Save (or a checkpoint).
func Load(path string) (*Model, error) {
	f, err := modelfile.Read(path, 0)
	if err != nil {
		return nil, err
	}
	m, _, _, err := FromFile(f)
	return m, err
}
