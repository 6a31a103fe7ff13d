package ae

import (
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/modelfile"
)

// meta is the autoencoder's part of a model file's metadata.
type meta struct {
	Config Config `json:"config"`
	data.Fitted
	Threshold  *anomaly.Threshold    `json:"threshold,omitempty"`
	Profile    *Profile              `json:"profile,omitempty"`
	Provenance *modelfile.Provenance `json:"provenance,omitempty"`
}

func (md *meta) Settings() *Config  { return &md.Config }
func (md *meta) Data() *data.Fitted { return &md.Fitted }
func (md *meta) Apply(m *Model, _ *modelfile.File) error {
	if md.Profile != nil {
		if err := md.Profile.check(md.Config.withDefaults()); err != nil {
			return err
		}
		md.Profile.compact()
	}
	m.Fitted, m.Threshold, m.Profile = md.Fitted, md.Threshold, md.Profile
	return nil
}

// loader opens autoencoder model files.
var loader = modelio.Kind[Config, *Model]{Name: Kind, Build: New, Resolve: func(c Config) (Config, modelio.Spec, error) {
	if err := c.Validate(); err != nil {
		return c, modelio.Spec{}, err
	}
	c = c.withDefaults()
	return c, modelio.Spec{Shapes: c.paramShapes(), Precision: c.Precision, Width: c.Inputs}, nil
}}

// File converts the model to a model file, with prov (may be nil) as its
// provenance section.
func (m *Model) File(prov *modelfile.Provenance) (*modelfile.File, error) {
	f, err := modelio.File(Kind, meta{m.cfg, m.Fitted, m.Threshold, m.Profile, prov}, m.Params())
	if err == nil && (m.Profile != nil || len(m.cfg.Categories) > 0) {
		// builds that predate profiles would ignore it and score by
		// the reconstruction error, builds that predate categories
		// would take their logits for the reconstruction: they refuse
		// version 2
		f.Version = profileVersion
	}
	return f, err
}

// profileVersion is the model-file format version a file with a Profile
// or Categories needs (see modelfile.Version).
const profileVersion = 2

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
