package vae

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/modelfile"
)

// meta is the VAE's part of a model file's metadata: its settings, rows,
// density threshold and provenance.
type meta struct {
	Config Config `json:"config"`
	data.Fitted
	Threshold *anomaly.Threshold `json:"threshold,omitempty"`
	// MissingCost is the model's, per encoding field
	MissingCost []float64             `json:"missing_cost,omitempty"`
	Marginals   *Marginals            `json:"marginals,omitempty"`
	Provenance  *modelfile.Provenance `json:"provenance,omitempty"`
}

// The loader's view of the metadata.
func (md *meta) Settings() *Config  { return &md.Config }
func (md *meta) Data() *data.Fitted { return &md.Fitted }

// Apply gives a loaded VAE its scaler, schema and threshold.
func (md *meta) Apply(v *Model, _ *modelfile.File) error {
	v.Fitted = md.Fitted
	v.Threshold = md.Threshold
	v.MissingCost = md.MissingCost
	if md.Marginals != nil {
		if err := md.Marginals.check(v.cfg.Inputs); err != nil {
			return err
		}
		v.Marginals = md.Marginals
	}
	if md.MissingCost != nil && (md.Encoding == nil || len(md.MissingCost) != len(md.Encoding.Fields)) {
		return fmt.Errorf("vae: %d missing-cell costs for an encoding of %d columns", len(md.MissingCost), fieldCount(md.Encoding))
	}
	for _, c := range md.MissingCost {
		if math.IsNaN(c) || math.IsInf(c, 0) {
			return fmt.Errorf("vae: a missing-cell cost of %v", c)
		}
	}
	return nil
}

// loader opens VAE files: the learned variance is a parameter like the
// networks', so the shapes say everything a file must hold.
var loader = modelio.Kind[Config, *Model]{Name: Kind, Build: New, Resolve: resolve}

func resolve(c Config) (Config, modelio.Spec, error) {
	err := c.Validate()
	c = c.withDefaults()
	return c, modelio.Spec{Shapes: c.paramShapes(), Precision: c.Precision, Width: c.Inputs}, err
}

// File converts the model to a model file, with prov (may be nil) as its
// provenance section.
func (m *Model) File(prov *modelfile.Provenance) (*modelfile.File, error) {
	f, err := modelio.File(Kind, meta{m.cfg, m.Fitted, m.Threshold, m.MissingCost, m.Marginals, prov}, m.Params())
	if err == nil && m.table() != nil {
		// builds that predate the table likelihood would score its rows
		// by a Gaussian throughout: they refuse version 2
		f.Version = 2
	}
	return f, err
}

func fieldCount(e *data.Encoding) int {
	if e == nil {
		return 0
	}
	return len(e.Fields)
}

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
