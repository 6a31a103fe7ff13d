package gan

import (
	"encoding/json"
	"fmt"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/persist"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
)

// Kind is the model-file kind of a GAN.
const Kind = "gan"

type meta struct {
	Config     Config                `json:"config"`
	Scaler     *data.Scaler          `json:"scaler,omitempty"`
	Columns    []string              `json:"columns,omitempty"`
	Image      []int                 `json:"image,omitempty"`
	Provenance *modelfile.Provenance `json:"provenance,omitempty"`
	Resume     *resume               `json:"resume,omitempty"`
}

type resume struct {
	GenOptim  persist.OptimState `json:"generator_optimizer"`
	DiscOptim persist.OptimState `json:"discriminator_optimizer"`
	Noise     string             `json:"noise_generator"`
	Shuffle   string             `json:"shuffle_generator"`
	Steps     int                `json:"steps"`
	Winning   int                `json:"winning_steps"`
	Warnings  []Warning          `json:"warnings,omitempty"`
	History   *train.History     `json:"history"`
}

const (
	genOptPrefix  = "optimizer/generator/"
	discOptPrefix = "optimizer/discriminator/"
	spectral      = "spectral/"
)

// File converts the model to a model file; with history not nil it is a
// checkpoint that also holds both optimisers, generator states, the step
// count and the history.
func (m *Model) File(prov *modelfile.Provenance, history *train.History) (*modelfile.File, error) {
	md := meta{Config: m.cfg, Scaler: m.Scaler, Columns: m.Columns, Image: m.Image, Provenance: prov}
	f := &modelfile.File{Kind: Kind, Tensors: persist.Params(m.Params())}
	for i, u := range m.SpectralU {
		f.Tensors = append(f.Tensors, modelfile.Tensor{Name: fmt.Sprintf("%s%d", spectral, i), Rows: 1, Cols: len(u), F64: append([]float64(nil), u...)})
	}
	if m.SpectralU != nil {
		f.Tensors = append(f.Tensors, modelfile.Tensor{Name: spectral + "inv_sigma", Rows: 1, Cols: len(m.invSigma), F64: append([]float64(nil), m.invSigma...)})
	}
	if history != nil {
		gt, gs := persist.Optimizer(m.genOpt, genOptPrefix)
		dt, ds := persist.Optimizer(m.discOpt, discOptPrefix)
		f.Tensors = append(append(f.Tensors, gt...), dt...)
		r := &resume{GenOptim: gs, DiscOptim: ds, Steps: m.steps, Winning: m.winning, Warnings: m.warnings, History: history}
		var err error
		if r.Noise, err = persist.Generator(m.noisePCG); err != nil {
			return nil, fmt.Errorf("gan: %w", err)
		}
		if r.Shuffle, err = persist.Generator(m.shufflePCG); err != nil {
			return nil, fmt.Errorf("gan: %w", err)
		}
		md.Resume = r
	}
	b, err := json.Marshal(md)
	if err != nil {
		return nil, fmt.Errorf("gan: %w", err)
	}
	f.Meta = b
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
	if f.Kind != Kind {
		return nil, nil, nil, fmt.Errorf("gan: model file holds a %q model", f.Kind)
	}
	var md meta
	if err := json.Unmarshal(f.Meta, &md); err != nil {
		return nil, nil, nil, fmt.Errorf("gan: model metadata: %w", err)
	}
	m, err := New(md.Config)
	if err != nil {
		return nil, nil, nil, err
	}
	if err := persist.SetParams(f, m.Params()); err != nil {
		return nil, nil, nil, fmt.Errorf("gan: %w", err)
	}
	if err := persist.CheckNoExtra(f, m.Params(), genOptPrefix, discOptPrefix, spectral); err != nil {
		return nil, nil, nil, fmt.Errorf("gan: %w", err)
	}
	for i := range m.SpectralU {
		t, ok := f.Tensor(fmt.Sprintf("%s%d", spectral, i))
		if !ok || t.F64 == nil || len(t.F64) != len(m.SpectralU[i]) {
			return nil, nil, nil, fmt.Errorf("gan: model file lacks spectral state %d", i)
		}
		copy(m.SpectralU[i], t.F64)
	}
	if m.cfg.SpectralNorm {
		t, ok := f.Tensor(spectral + "inv_sigma")
		if !ok || t.F64 == nil || len(t.F64) != len(m.invSigma) {
			return nil, nil, nil, fmt.Errorf("gan: model file lacks the spectral scales")
		}
		copy(m.invSigma, t.F64)
	}
	if md.Scaler != nil {
		if err := md.Scaler.Validate(md.Config.Outputs); err != nil {
			return nil, nil, nil, fmt.Errorf("gan: %w", err)
		}
	}
	m.Scaler, m.Columns, m.Image = md.Scaler, md.Columns, md.Image
	if md.Resume == nil {
		return m, nil, md.Provenance, nil
	}
	r := md.Resume
	if err := persist.SetOptimizer(m.genOpt, f, genOptPrefix, r.GenOptim); err != nil {
		return nil, nil, nil, fmt.Errorf("gan: %w", err)
	}
	if err := persist.SetOptimizer(m.discOpt, f, discOptPrefix, r.DiscOptim); err != nil {
		return nil, nil, nil, fmt.Errorf("gan: %w", err)
	}
	if err := persist.SetGenerator(m.noisePCG, r.Noise); err != nil {
		return nil, nil, nil, fmt.Errorf("gan: %w", err)
	}
	if err := persist.SetGenerator(m.shufflePCG, r.Shuffle); err != nil {
		return nil, nil, nil, fmt.Errorf("gan: %w", err)
	}
	m.steps, m.winning, m.warnings = r.Steps, r.Winning, r.Warnings
	if r.History == nil {
		r.History = &train.History{}
	}
	return m, r.History, md.Provenance, nil
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
