package modelfile

import (
	"encoding/json"
	"fmt"
	"strings"

	"github.com/quernlab/quern/layers"
)

// A model file's metadata is a JSON object whose top-level keys are
// sections, each written by the layer that owns it: the model kind's own
// ("config", "scaler", "threshold", "columns", "image"), "provenance"
// (where the training data came from), "training" (package train: the
// settings and a summary of the run), "checkpoint" (package train: the
// state a resumed run needs) and "command" (the command line's settings).
// Readers take the sections they know and ignore the others.

// Section decodes the metadata section key into v and reports whether it
// was there.
func (f *File) Section(key string, v any) (bool, error) {
	if len(f.Meta) == 0 {
		return false, nil
	}
	var m map[string]json.RawMessage
	if err := json.Unmarshal(f.Meta, &m); err != nil {
		return false, fmt.Errorf("modelfile: metadata: %w", err)
	}
	raw, ok := m[key]
	if !ok || string(raw) == "null" {
		return false, nil
	}
	if err := json.Unmarshal(raw, v); err != nil {
		return true, fmt.Errorf("modelfile: metadata section %q: %w", key, err)
	}
	return true, nil
}

// SetSection sets the metadata section key to v (nil removes it).
func (f *File) SetSection(key string, v any) error {
	m := map[string]json.RawMessage{}
	if len(f.Meta) > 0 {
		if err := json.Unmarshal(f.Meta, &m); err != nil {
			return fmt.Errorf("modelfile: metadata: %w", err)
		}
	}
	if v == nil {
		delete(m, key)
	} else {
		b, err := json.Marshal(v)
		if err != nil {
			return fmt.Errorf("modelfile: metadata section %q: %w", key, err)
		}
		m[key] = b
	}
	b, err := json.Marshal(m)
	if err != nil {
		return fmt.Errorf("modelfile: metadata: %w", err)
	}
	f.Meta = b
	return nil
}

// Provenance records where a model's training data came from.
type Provenance struct {
	// DataFile is the training data's path as given.
	DataFile string `json:"data_file,omitempty"`
	// DataFormat is the format it was read as (csv, idx, images).
	DataFormat string `json:"data_format,omitempty"`
	// DataFingerprint is the SHA-256 of the loaded training rows.
	DataFingerprint string `json:"data_fingerprint,omitempty"`
	DataRows        int    `json:"data_rows,omitempty"`
}

// ProvenanceOf returns the file's provenance section, or nil.
func ProvenanceOf(f *File) (*Provenance, error) {
	var p Provenance
	ok, err := f.Section("provenance", &p)
	if !ok || err != nil {
		return nil, err
	}
	return &p, nil
}

// TrainingPrefix starts the names of tensors that hold training state
// (optimiser moments) rather than the model: loaders of a model skip them.
const TrainingPrefix = "optimizer/"

// FromParams converts parameters to tensors of their own precision
// (copies), named after them.
func FromParams(ps []*layers.Param) []Tensor {
	out := make([]Tensor, 0, len(ps))
	for _, p := range ps {
		r, c := p.Shape()
		t := Tensor{Name: p.Name(), Rows: r, Cols: c}
		if p.Precision() == layers.Float64 {
			t.F64 = append([]float64(nil), p.F64()...)
		} else {
			t.F32 = append([]float32(nil), p.F32()...)
		}
		out = append(out, t)
	}
	return out
}

// CheckShapes reports the first parameter of want that the file lacks or
// holds in another shape or precision. Loaders call it before building a
// model, so that a file whose settings promise more than its tensors hold
// is refused before anything is allocated for it.
func (f *File) CheckShapes(want []layers.ParamShape, prec layers.Precision) error {
	index := f.index()
	for _, s := range want {
		t, ok := index[s.Name]
		if !ok {
			return fmt.Errorf("model file has no tensor %q", s.Name)
		}
		if t.Rows != s.Rows || t.Cols != s.Cols {
			return fmt.Errorf("tensor %q is %dx%d, the model's settings need %dx%d", s.Name, t.Rows, t.Cols, s.Rows, s.Cols)
		}
		if (prec == layers.Float64) != (t.F64 != nil) {
			return fmt.Errorf("tensor %q is not %v", s.Name, prec)
		}
	}
	return nil
}

// index maps tensor names to the tensors.
func (f *File) index() map[string]*Tensor {
	m := make(map[string]*Tensor, len(f.Tensors))
	for i := range f.Tensors {
		m[f.Tensors[i].Name] = &f.Tensors[i]
	}
	return m
}

// SetParams fills every parameter from the tensor of its name; a missing
// tensor or a shape or precision mismatch is an error.
func (f *File) SetParams(ps []*layers.Param) error {
	index := f.index()
	for _, p := range ps {
		r, c := p.Shape()
		t, ok := index[p.Name()]
		if !ok {
			return fmt.Errorf("model file has no tensor %q", p.Name())
		}
		if t.Rows != r || t.Cols != c {
			return fmt.Errorf("tensor %q is %dx%d, the model needs %dx%d", p.Name(), t.Rows, t.Cols, r, c)
		}
		if (p.Precision() == layers.Float64) != (t.F64 != nil) {
			return fmt.Errorf("tensor %q is not %v", p.Name(), p.Precision())
		}
		if p.Precision() == layers.Float64 {
			copy(p.F64(), t.F64)
		} else {
			copy(p.F32(), t.F32)
		}
	}
	return nil
}

// CheckNoExtra reports a tensor that is neither one of ps, nor training
// state (TrainingPrefix), nor under one of the other allowed prefixes.
func (f *File) CheckNoExtra(ps []*layers.Param, prefixes ...string) error {
	known := map[string]bool{}
	for _, p := range ps {
		known[p.Name()] = true
	}
	prefixes = append(prefixes, TrainingPrefix)
outer:
	for _, t := range f.Tensors {
		if known[t.Name] {
			continue
		}
		for _, pre := range prefixes {
			if strings.HasPrefix(t.Name, pre) {
				continue outer
			}
		}
		return fmt.Errorf("model file has an unexpected tensor %q", t.Name)
	}
	return nil
}

// Header is a model file's kind and its meta data decoded into v, checked
// against the kind a loader expects.
func (f *File) Header(kind string, v any) error {
	if f.Kind != kind {
		return fmt.Errorf("model file holds a %q model, not %q", f.Kind, kind)
	}
	if err := json.Unmarshal(f.Meta, v); err != nil {
		return fmt.Errorf("model metadata: %w", err)
	}
	return nil
}
