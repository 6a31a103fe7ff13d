package optim

import (
	"errors"
	"fmt"
	"math"

	"github.com/quernlab/quern/layers"
)

// ErrConfig is wrapped by every configuration error.
var ErrConfig = errors.New("optim: invalid configuration")

// Optimizer applies one update to parameters from their gradient buffers.
// Updates are in place and allocate nothing after the first call for a
// given parameter set. Frozen parameters are skipped.
type Optimizer interface {
	// Update applies one step using each parameter's current gradient.
	Update(params []*layers.Param) error
	// Steps is the number of updates applied so far.
	Steps() int
	// Rate is the learning rate the next update will use.
	Rate() float64
	// Export returns a copy of the optimiser's state for a checkpoint.
	Export() *State
	// Import restores a state produced by Export of the same kind.
	Import(*State) error
}

// State is an optimiser's resumable state: its kind, the number of updates
// applied, and per-parameter slots (moments, velocities) keyed by parameter
// name. Values are float64 whatever the parameters' precision (float32
// converts exactly).
type State struct {
	Kind  string
	Steps int
	Slots map[string][][]float64
}

// slots holds one parameter's per-element state vectors (up to two).
type slots[T float32 | float64] struct {
	a, b []T
	// fresh is true until the first update, when no state was restored.
	fresh bool
}

func (s *slots[T]) vecs(n int) [][]T { return [][]T{s.a, s.b}[:n] }

// store keeps per-parameter state for float32 and float64 parameters.
// Imported state waits in pending until its parameter is first updated.
type store struct {
	n       int // state vectors per parameter
	s32     map[*layers.Param]*slots[float32]
	s64     map[*layers.Param]*slots[float64]
	pending map[string][][]float64
}

func newStore(n int) store {
	return store{n: n, s32: map[*layers.Param]*slots[float32]{}, s64: map[*layers.Param]*slots[float64]{}, pending: map[string][][]float64{}}
}

func newSlots[T float32 | float64](n, size int, restored [][]float64) *slots[T] {
	v := &slots[T]{fresh: restored == nil}
	if n > 0 {
		v.a = make([]T, size)
	}
	if n > 1 {
		v.b = make([]T, size)
	}
	for i, dst := range v.vecs(n) {
		if i < len(restored) {
			for j := range dst {
				dst[j] = T(restored[i][j])
			}
		}
	}
	return v
}

func (s *store) take(p *layers.Param) ([][]float64, error) {
	v, ok := s.pending[p.Name()]
	if !ok {
		return nil, nil
	}
	if len(v) > 0 && len(v[0]) != p.Len() {
		return nil, fmt.Errorf("optim: restored state for %q has %d values, parameter has %d", p.Name(), len(v[0]), p.Len())
	}
	delete(s.pending, p.Name())
	return v, nil
}

func (s *store) get32(p *layers.Param) (*slots[float32], error) {
	if v, ok := s.s32[p]; ok {
		return v, nil
	}
	r, err := s.take(p)
	if err != nil {
		return nil, err
	}
	v := newSlots[float32](s.n, p.Len(), r)
	s.s32[p] = v
	return v, nil
}

func (s *store) get64(p *layers.Param) (*slots[float64], error) {
	if v, ok := s.s64[p]; ok {
		return v, nil
	}
	r, err := s.take(p)
	if err != nil {
		return nil, err
	}
	v := newSlots[float64](s.n, p.Len(), r)
	s.s64[p] = v
	return v, nil
}

func to64[T float32 | float64](a []T) []float64 {
	o := make([]float64, len(a))
	for i, v := range a {
		o[i] = float64(v)
	}
	return o
}

func (s *store) export() map[string][][]float64 {
	out := map[string][][]float64{}
	for p, v := range s.s32 {
		for _, x := range v.vecs(s.n) {
			out[p.Name()] = append(out[p.Name()], to64(x))
		}
	}
	for p, v := range s.s64 {
		for _, x := range v.vecs(s.n) {
			out[p.Name()] = append(out[p.Name()], to64(x))
		}
	}
	for name, v := range s.pending {
		for _, x := range v {
			out[name] = append(out[name], append([]float64(nil), x...))
		}
	}
	return out
}

func (s *store) importSlots(kind string, m map[string][][]float64) error {
	for name, v := range m {
		if len(v) != s.n {
			return fmt.Errorf("optim: %s state for %q has %d slots, want %d", kind, name, len(v), s.n)
		}
		for i := 1; i < len(v); i++ {
			if len(v[i]) != len(v[0]) {
				return fmt.Errorf("optim: %s state for %q has ragged slots", kind, name)
			}
		}
	}
	*s = newStore(s.n)
	for name, v := range m {
		cc := make([][]float64, len(v))
		for i := range v {
			cc[i] = append([]float64(nil), v[i]...)
		}
		s.pending[name] = cc
	}
	return nil
}

func positive(name string, v float64) error {
	if !(v > 0) || math.IsInf(v, 0) {
		return fmt.Errorf("%w: %s is %v, want > 0", ErrConfig, name, v)
	}
	return nil
}

func inUnit(name string, v float64) error {
	if !(v >= 0 && v < 1) {
		return fmt.Errorf("%w: %s is %v, want in [0, 1)", ErrConfig, name, v)
	}
	return nil
}

func nonNeg(name string, v float64) error {
	if !(v >= 0) || math.IsInf(v, 0) {
		return fmt.Errorf("%w: %s is %v, want >= 0", ErrConfig, name, v)
	}
	return nil
}
