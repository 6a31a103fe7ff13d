package modelio

import (
	"encoding/json"
	"fmt"
	"slices"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/modelfile"
)

// File makes the model file of a kind: meta (a struct marshalling to the
// metadata object) and the parameters, then any extra tensors.
func File(kind string, meta any, params []*layers.Param, extra ...modelfile.Tensor) (*modelfile.File, error) {
	b, err := json.Marshal(meta)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", kind, err)
	}
	return &modelfile.File{Kind: kind, Meta: b, Tensors: append(modelfile.FromParams(params), extra...)}, nil
}

// Spec is what a loader checks of a file before building its model: the
// parameters the settings imply, their precision, and the width the
// stored scaler must fit.
type Spec struct {
	Shapes    []layers.ParamShape
	Precision layers.Precision
	Width     int
}

// Check reports a file whose tensors or scaler do not fit the model its
// settings describe, so that nothing is built for a file whose settings
// promise more than it holds.
func Check(kind string, f *modelfile.File, s Spec, rows data.Fitted) error {
	if err := f.CheckShapes(s.Shapes, s.Precision); err != nil {
		return fmt.Errorf("%s: %w", kind, err)
	}
	if rows.Scaler != nil {
		if err := rows.Scaler.Validate(s.Width); err != nil {
			return fmt.Errorf("%s: %w", kind, err)
		}
	}
	if rows.Columns != nil && len(rows.Columns) != s.Width {
		return fmt.Errorf("%s: the file names %d columns for rows of %d", kind, len(rows.Columns), s.Width)
	}
	if e := rows.Encoding; e != nil {
		if err := e.Check(); err != nil {
			return fmt.Errorf("%s: %w", kind, err)
		}
		if e.Width() != s.Width || !slices.Equal(e.Columns(), rows.Columns) {
			return fmt.Errorf("%s: the file's encoding makes %d inputs named %v, its rows have %d named %v", kind, e.Width(), e.Columns(), s.Width, rows.Columns)
		}
	}
	if rows.Image != nil {
		if !imageOf(rows.Image, s.Width) {
			return fmt.Errorf("%s: the file's image shape %v does not make rows of %d values", kind, rows.Image, s.Width)
		}
	}
	return nil
}

// imageOf reports whether im is a height, width and channel count whose
// product is width (each factor checked first, so the product cannot
// overflow).
func imageOf(im []int, width int) bool {
	if len(im) != 3 {
		return false
	}
	n := 1
	for _, d := range im {
		if d <= 0 || d > width || n*d > width {
			return false
		}
		n *= d
	}
	return n == width
}

// Fill copies the file's tensors into the built model's parameters and
// refuses a tensor that is neither a parameter, nor training state, nor
// under one of the allowed prefixes.
func Fill(kind string, f *modelfile.File, params []*layers.Param, allowed ...string) error {
	if err := f.SetParams(params); err != nil {
		return fmt.Errorf("%s: %w", kind, err)
	}
	if err := f.CheckNoExtra(params, allowed...); err != nil {
		return fmt.Errorf("%s: %w", kind, err)
	}
	return nil
}

// Header decodes a file's metadata into meta after checking that it holds
// a model of the kind.
func Header(kind string, f *modelfile.File, meta any) error {
	if err := f.Header(kind, meta); err != nil {
		return fmt.Errorf("%s: %w", kind, err)
	}
	return nil
}

// Kind is a model kind as the shared loader sees it: how to validate its
// settings (filling the defaults) and say what a file must hold for them,
// and how to build a model from them.
type Kind[C any, M Built] struct {
	Name    string
	Resolve func(C) (C, Spec, error)
	Build   func(C) (M, error)
	// Allowed lists tensor name prefixes of the kind's own besides its
	// parameters.
	Allowed []string
}

// Built is a model as the loader fills it.
type Built interface {
	Params() []*layers.Param
}

// Meta is a kind's metadata struct as the loader sees it (a pointer to
// it): its settings, its rows, and what it gives the built model.
type Meta[C, M any] interface {
	Settings() *C
	Data() *data.Fitted
	// Apply copies the rest of the metadata (and any tensors of the
	// kind's own) into the built model.
	Apply(m M, f *modelfile.File) error
}

// Load reads a model of the kind from f: it decodes the metadata into md,
// validates the settings, checks the file's tensors and scaler against
// them, then builds the model, fills its parameters and lets md apply the
// rest.
func Load[C any, M Built](k Kind[C, M], f *modelfile.File, md Meta[C, M]) (M, error) {
	var zero M
	if err := Header(k.Name, f, md); err != nil {
		return zero, err
	}
	c, spec, err := k.Resolve(*md.Settings())
	if err != nil {
		return zero, err
	}
	if err := Check(k.Name, f, spec, *md.Data()); err != nil {
		return zero, err
	}
	m, err := k.Build(c)
	if err != nil {
		return zero, err
	}
	if err := Fill(k.Name, f, m.Params(), k.Allowed...); err != nil {
		return zero, err
	}
	if err := md.Apply(m, f); err != nil {
		return zero, err
	}
	return m, nil
}

// Saver is a model that converts itself to a model file.
type Saver interface {
	File(prov *modelfile.Provenance) (*modelfile.File, error)
}

// Save writes m to path atomically.
func Save(path string, m Saver, prov *modelfile.Provenance) error {
	f, err := m.File(prov)
	if err != nil {
		return err
	}
	return modelfile.Write(path, f)
}

// Open reads the model file at path with a FromFile; the file's errors
// name the path.
func Open[M any](path string, fromFile func(*modelfile.File) (M, error)) (M, error) {
	var zero M
	f, err := modelfile.Read(path, 0)
	if err != nil {
		return zero, err
	}
	m, err := fromFile(f)
	if err != nil {
		return zero, fmt.Errorf("%s: %w", path, err)
	}
	return m, nil
}

// Finite reports the first row of out (rows of cols values) that holds a
// NaN or an infinity: what a pass (a code, a reconstruction) gives for an
// input outside the range the model can represent, which must never pass
// for a result.
func Finite(kind, what string, out []float32, cols int) error {
	for i, v := range out {
		if v-v != 0 {
			return fmt.Errorf("%s: row %d: the %s is not finite (the row is outside the range the model can represent)", kind, i/cols+1, what)
		}
	}
	return nil
}
