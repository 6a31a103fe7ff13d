package data

import (
	"fmt"
	"math"
)

// ScaleKind names a column scaling.
type ScaleKind string

// Valid reports whether k is a known scaling.
func (k ScaleKind) Valid() bool { return k == ScaleNone || k == ScaleStandard || k == ScaleMinMax }

const (
	// ScaleNone leaves values unchanged.
	ScaleNone ScaleKind = "none"
	// ScaleStandard maps each column to zero mean and unit variance.
	ScaleStandard ScaleKind = "standard"
	// ScaleMinMax maps each column's training range onto [0, 1].
	ScaleMinMax ScaleKind = "minmax"
)

// Scaler is a per-column affine map x' = (x - Offset[j]) * Factor[j],
// fitted on training data and stored with a model so that inference applies
// the same map. Its fields marshal as JSON.
type Scaler struct {
	Kind   ScaleKind `json:"kind"`
	Offset []float64 `json:"offset"`
	Factor []float64 `json:"factor"`
}

// Fit returns a scaler of the given kind fitted on d. Standard scaling uses
// the population standard deviation; a constant column gets factor 1 (it
// is only centred) so that no value becomes NaN or infinite. Min-max maps
// the training minimum to 0 and maximum to 1; a constant column maps to 0.
func Fit(kind ScaleKind, d *Dataset) (*Scaler, error) {
	if d.fit != nil {
		return d.fit(kind)
	}
	if d.Rows == 0 {
		return nil, fmt.Errorf("data: cannot fit a %s scaler on no rows", kind)
	}
	standard := func() (mean, sd []float64) {
		mean = make([]float64, d.Cols)
		for i := 0; i < d.Rows; i++ {
			for j, v := range d.Row(i) {
				mean[j] += float64(v)
			}
		}
		for j := range mean {
			mean[j] /= float64(d.Rows)
		}
		sd = make([]float64, d.Cols)
		for i := 0; i < d.Rows; i++ {
			for j, v := range d.Row(i) {
				e := float64(v) - mean[j]
				sd[j] += e * e
			}
		}
		for j := range sd {
			sd[j] = math.Sqrt(sd[j] / float64(d.Rows))
		}
		return mean, sd
	}
	ranges := func() (lo, hi []float64) {
		lo, hi = make([]float64, d.Cols), make([]float64, d.Cols)
		for j := range lo {
			lo[j], hi[j] = math.Inf(1), math.Inf(-1)
		}
		for i := 0; i < d.Rows; i++ {
			for j, v := range d.Row(i) {
				lo[j] = math.Min(lo[j], float64(v))
				hi[j] = math.Max(hi[j], float64(v))
			}
		}
		return lo, hi
	}
	return scalerOf(kind, d.Cols, standard, ranges)
}

// scalerOf is the scaler of kind for cols columns whose means and
// population standard deviations standard gives, and whose least and
// greatest values ranges gives (each called only when the kind needs
// it): Fit's, and a Stream's from its statistics.
func scalerOf(kind ScaleKind, cols int, standard func() (mean, sd []float64), ranges func() (lo, hi []float64)) (*Scaler, error) {
	s := &Scaler{Kind: kind, Offset: make([]float64, cols), Factor: make([]float64, cols)}
	switch kind {
	case ScaleNone, "":
		s.Kind = ScaleNone
		for j := range s.Factor {
			s.Factor[j] = 1
		}
	case ScaleStandard:
		mean, sd := standard()
		for j := range cols {
			s.Offset[j], s.Factor[j] = mean[j], 1
			if sd[j] > 0 {
				s.Factor[j] = 1 / sd[j]
			}
		}
	case ScaleMinMax:
		lo, hi := ranges()
		for j := range cols {
			s.Offset[j], s.Factor[j] = lo[j], 1
			if hi[j] > lo[j] {
				s.Factor[j] = 1 / (hi[j] - lo[j])
			}
		}
	default:
		return nil, fmt.Errorf("%w: unknown scaling %q", ErrConfig, kind)
	}
	return s, nil
}

// Validate checks that the scaler is well formed for cols columns.
func (s *Scaler) Validate(cols int) error {
	if len(s.Offset) != cols || len(s.Factor) != cols {
		return fmt.Errorf("data: scaler has %d/%d entries, data has %d columns", len(s.Offset), len(s.Factor), cols)
	}
	for j := range s.Offset {
		if math.IsNaN(s.Offset[j]) || math.IsInf(s.Offset[j], 0) || !(s.Factor[j] != 0) || math.IsInf(s.Factor[j], 0) {
			return fmt.Errorf("data: scaler column %d has offset %v factor %v", j, s.Offset[j], s.Factor[j])
		}
	}
	return nil
}

// Identity reports whether the map leaves every value as it is.
func (s *Scaler) Identity() bool {
	for j := range s.Offset {
		if s.Offset[j] != 0 || s.Factor[j] != 1 {
			return false
		}
	}
	return true
}

// ApplyRows scales x (rows of len(Offset) values) in place.
func (s *Scaler) ApplyRows(x []float32) {
	c := len(s.Offset)
	for i := range x {
		j := i % c
		x[i] = float32((float64(x[i]) - s.Offset[j]) * s.Factor[j])
	}
}

// InvertRows undoes ApplyRows in place.
func (s *Scaler) InvertRows(x []float32) {
	c := len(s.Offset)
	for i := range x {
		j := i % c
		x[i] = float32(float64(x[i])/s.Factor[j] + s.Offset[j])
	}
}

// Apply returns a scaled copy of d, or d itself when the map changes
// nothing (an identity scaler: no copy is made).
func (s *Scaler) Apply(d *Dataset) (*Dataset, error) {
	if err := s.Validate(d.Cols); err != nil {
		return nil, err
	}
	if s.Identity() {
		return d, nil // nothing to change: no copy
	}
	out := *d
	out.X = append([]float32(nil), d.X...)
	s.ApplyRows(out.X)
	return &out, nil
}
