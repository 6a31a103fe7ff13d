package persist

import (
	"encoding"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"sort"
	"strings"

	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/optim"
	"github.com/quernlab/quern/train"
)

// Params converts parameters to tensors of their own precision (copies).
func Params(ps []*layers.Param) []modelfile.Tensor {
	out := make([]modelfile.Tensor, 0, len(ps))
	for _, p := range ps {
		r, c := p.Shape()
		t := modelfile.Tensor{Name: p.Name(), Rows: r, Cols: c}
		if p.Precision() == layers.Float64 {
			t.F64 = append([]float64(nil), p.F64()...)
		} else {
			t.F32 = append([]float32(nil), p.F32()...)
		}
		out = append(out, t)
	}
	return out
}

// SetParams fills every parameter from the tensor of its name; a missing
// tensor or a shape or precision mismatch is an error.
func SetParams(f *modelfile.File, ps []*layers.Param) error {
	for _, p := range ps {
		t, ok := f.Tensor(p.Name())
		if !ok {
			return fmt.Errorf("model file has no tensor %q", p.Name())
		}
		r, c := p.Shape()
		if t.Rows != r || t.Cols != c {
			return fmt.Errorf("tensor %q is %dx%d, the model needs %dx%d", p.Name(), t.Rows, t.Cols, r, c)
		}
		if p.Precision() == layers.Float64 {
			if t.F64 == nil {
				return fmt.Errorf("tensor %q is float32, the model is float64", p.Name())
			}
			copy(p.F64(), t.F64)
		} else {
			if t.F32 == nil {
				return fmt.Errorf("tensor %q is float64, the model is float32", p.Name())
			}
			copy(p.F32(), t.F32)
		}
	}
	return nil
}

// CheckNoExtra reports tensors that are neither parameters nor under one
// of the allowed prefixes.
func CheckNoExtra(f *modelfile.File, ps []*layers.Param, prefixes ...string) error {
	known := map[string]bool{}
	for _, p := range ps {
		known[p.Name()] = true
	}
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

// OptimState is the JSON part of an optimiser's exported state.
type OptimState struct {
	Kind  string `json:"kind"`
	Steps int    `json:"steps"`
	Slots int    `json:"slots"`
}

// Optimizer converts an optimiser's state into tensors named
// "<prefix><param>#<slot>" (float64, 1 x n) and its JSON part.
func Optimizer(o optim.Optimizer, prefix string) ([]modelfile.Tensor, OptimState) {
	st := o.Export()
	js := OptimState{Kind: st.Kind, Steps: st.Steps}
	names := make([]string, 0, len(st.Slots))
	for n := range st.Slots {
		names = append(names, n)
	}
	sort.Strings(names)
	var ts []modelfile.Tensor
	for _, n := range names {
		js.Slots = len(st.Slots[n])
		for i, v := range st.Slots[n] {
			if len(v) == 0 {
				continue
			}
			ts = append(ts, modelfile.Tensor{Name: fmt.Sprintf("%s%s#%d", prefix, n, i), Rows: 1, Cols: len(v), F64: append([]float64(nil), v...)})
		}
	}
	return ts, js
}

// SetOptimizer restores an optimiser from tensors written by Optimizer.
func SetOptimizer(o optim.Optimizer, f *modelfile.File, prefix string, js OptimState) error {
	st := &optim.State{Kind: js.Kind, Steps: js.Steps, Slots: map[string][][]float64{}}
	for _, t := range f.Tensors {
		if !strings.HasPrefix(t.Name, prefix) {
			continue
		}
		rest := strings.TrimPrefix(t.Name, prefix)
		i := strings.LastIndexByte(rest, '#')
		if i < 0 || t.F64 == nil {
			return fmt.Errorf("malformed optimiser tensor %q", t.Name)
		}
		var slot int
		if _, err := fmt.Sscanf(rest[i+1:], "%d", &slot); err != nil || slot < 0 || slot >= js.Slots {
			return fmt.Errorf("malformed optimiser tensor %q", t.Name)
		}
		name := rest[:i]
		if st.Slots[name] == nil {
			st.Slots[name] = make([][]float64, js.Slots)
		}
		st.Slots[name][slot] = t.F64
	}
	for name, s := range st.Slots {
		for k := range s {
			if s[k] == nil {
				return fmt.Errorf("optimiser state for %q lacks slot %d", name, k)
			}
		}
	}
	return o.Import(st)
}

// Generator returns a math/rand/v2 generator's state as base64.
func Generator(g encoding.BinaryMarshaler) (string, error) {
	b, err := g.MarshalBinary()
	if err != nil {
		return "", err
	}
	return base64.StdEncoding.EncodeToString(b), nil
}

// SetGenerator restores a generator's state from base64.
func SetGenerator(g encoding.BinaryUnmarshaler, s string) error {
	b, err := base64.StdEncoding.DecodeString(s)
	if err != nil {
		return fmt.Errorf("generator state: %w", err)
	}
	return g.UnmarshalBinary(b)
}

// Resume is the JSON part of a checkpoint's training state for a model
// with one optimiser and two generators (noise and shuffling).
type Resume struct {
	Optim   OptimState     `json:"optimizer"`
	Noise   string         `json:"noise_generator"`
	Shuffle string         `json:"shuffle_generator"`
	History *train.History `json:"history"`
}

// SaveTraining captures an optimiser (as tensors under prefix), two
// generators and a history for a checkpoint.
func SaveTraining(o optim.Optimizer, prefix string, noise, shuffle encoding.BinaryMarshaler, h *train.History) ([]modelfile.Tensor, *Resume, error) {
	ts, os := Optimizer(o, prefix)
	r := &Resume{Optim: os, History: h}
	var err error
	if r.Noise, err = Generator(noise); err != nil {
		return nil, nil, err
	}
	if r.Shuffle, err = Generator(shuffle); err != nil {
		return nil, nil, err
	}
	return ts, r, nil
}

// LoadTraining restores what SaveTraining captured and returns the history
// (empty, not nil, when the checkpoint had none).
func LoadTraining(f *modelfile.File, r *Resume, o optim.Optimizer, prefix string, noise, shuffle encoding.BinaryUnmarshaler) (*train.History, error) {
	if err := SetOptimizer(o, f, prefix, r.Optim); err != nil {
		return nil, err
	}
	if err := SetGenerator(noise, r.Noise); err != nil {
		return nil, err
	}
	if err := SetGenerator(shuffle, r.Shuffle); err != nil {
		return nil, err
	}
	if r.History == nil {
		return &train.History{}, nil
	}
	return r.History, nil
}

// Encode builds a model file of the given kind from metadata and tensors.
func Encode(kind string, meta any, tensors []modelfile.Tensor) (*modelfile.File, error) {
	b, err := json.Marshal(meta)
	if err != nil {
		return nil, err
	}
	return &modelfile.File{Kind: kind, Meta: b, Tensors: tensors}, nil
}

// Decode checks a model file's kind and unmarshals its metadata.
func Decode(f *modelfile.File, kind string, meta any) error {
	if f.Kind != kind {
		return fmt.Errorf("model file holds a %q model, not %q", f.Kind, kind)
	}
	if err := json.Unmarshal(f.Meta, meta); err != nil {
		return fmt.Errorf("model metadata: %w", err)
	}
	return nil
}
