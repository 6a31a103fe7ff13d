package layers

import "fmt"

// Precision is the floating-point width of a parameter's storage.
type Precision uint8

const (
	// Float32 is the default precision for training and inference.
	Float32 Precision = iota
	// Float64 is used for gradient checks and reference computations.
	Float64
)

// String returns "float32" or "float64".
func (p Precision) String() string {
	switch p {
	case Float32:
		return "float32"
	case Float64:
		return "float64"
	}
	return fmt.Sprintf("Precision(%d)", uint8(p))
}

// Valid reports whether p is a known precision.
func (p Precision) Valid() bool { return p == Float32 || p == Float64 }

// Param is a named, trainable matrix of rows x cols values stored row-major,
// with a gradient buffer of the same size. Exactly one of the float32 or
// float64 buffers is in use, as chosen by its Precision.
//
// The value slices returned by F32 and F64 are the parameter's own storage:
// the training graph reads them in place and optimisers write them in place.
// A Param is not safe for concurrent mutation; concurrent reads are safe.
type Param struct {
	name       string
	rows, cols int
	prec       Precision
	v32, g32   []float32
	v64, g64   []float64
	frozen     bool
}

// NewParam returns a zero-valued parameter. It panics if rows or cols is not
// positive or prec is unknown: those are programmer errors.
func NewParam(name string, rows, cols int, prec Precision) *Param {
	if rows <= 0 || cols <= 0 {
		panic(fmt.Sprintf("layers: NewParam(%q): non-positive shape %dx%d", name, rows, cols))
	}
	p := &Param{name: name, rows: rows, cols: cols, prec: prec}
	n := rows * cols
	switch prec {
	case Float32:
		p.v32 = make([]float32, n)
	case Float64:
		p.v64 = make([]float64, n)
	default:
		panic(fmt.Sprintf("layers: NewParam(%q): unknown precision %d", name, prec))
	}
	return p
}

// Name is the parameter's stable name, e.g. "encoder.0.weight".
func (p *Param) Name() string { return p.name }

// Shape returns the parameter's rows and columns.
func (p *Param) Shape() (rows, cols int) { return p.rows, p.cols }

// Len is rows*cols.
func (p *Param) Len() int { return p.rows * p.cols }

// Precision is the storage precision.
func (p *Param) Precision() Precision { return p.prec }

// F32 is the float32 value storage (nil for a Float64 parameter).
func (p *Param) F32() []float32 { return p.v32 }

// F64 is the float64 value storage (nil for a Float32 parameter).
func (p *Param) F64() []float64 { return p.v64 }

// Grad32 is the float32 gradient buffer (nil for a Float64 parameter),
// made on the first call: a model that is only used, never trained,
// holds no gradients (a server of ten thousand models saves their
// size). Like the values, it is not for concurrent mutation: the first
// call belongs to whoever trains the parameter.
func (p *Param) Grad32() []float32 {
	if p.g32 == nil && p.prec == Float32 {
		p.g32 = make([]float32, p.Len())
	}
	return p.g32
}

// Grad64 is the float64 gradient buffer (nil for a Float32 parameter),
// made on the first call as Grad32's is.
func (p *Param) Grad64() []float64 {
	if p.g64 == nil && p.prec == Float64 {
		p.g64 = make([]float64, p.Len())
	}
	return p.g64
}

// Frozen reports whether the parameter is excluded from training.
func (p *Param) Frozen() bool { return p.frozen }

// SetFrozen freezes or unfreezes the parameter. Training graphs built after
// the call honour it; optimisers skip frozen parameters.
func (p *Param) SetFrozen(f bool) { p.frozen = f }

// At returns element i of the value as float64.
func (p *Param) At(i int) float64 {
	if p.prec == Float32 {
		return float64(p.v32[i])
	}
	return p.v64[i]
}

// SetAt sets element i of the value.
func (p *Param) SetAt(i int, v float64) {
	if p.prec == Float32 {
		p.v32[i] = float32(v)
		return
	}
	p.v64[i] = v
}

// GradAt returns element i of the gradient as float64.
func (p *Param) GradAt(i int) float64 {
	if p.prec == Float32 {
		return float64(p.Grad32()[i])
	}
	return p.Grad64()[i]
}

// ZeroGrad clears the gradient buffer.
func (p *Param) ZeroGrad() {
	clear(p.g32)
	clear(p.g64)
}

// Values returns a float64 copy of the value.
func (p *Param) Values() []float64 {
	out := make([]float64, p.Len())
	for i := range out {
		out[i] = p.At(i)
	}
	return out
}

// SetValues copies src into the value. It returns an error naming the
// parameter when the length differs.
func (p *Param) SetValues(src []float64) error {
	if len(src) != p.Len() {
		return fmt.Errorf("layers: parameter %q holds %d values, got %d", p.name, p.Len(), len(src))
	}
	for i, v := range src {
		p.SetAt(i, v)
	}
	return nil
}

// CopyFrom copies the value of q, which must have the same shape, into p.
func (p *Param) CopyFrom(q *Param) error {
	if p.rows != q.rows || p.cols != q.cols {
		return fmt.Errorf("layers: copy %q (%dx%d) into %q (%dx%d): shape mismatch", q.name, q.rows, q.cols, p.name, p.rows, p.cols)
	}
	if p.prec == q.prec {
		copy(p.v32, q.v32)
		copy(p.v64, q.v64)
		return nil
	}
	for i := 0; i < p.Len(); i++ {
		p.SetAt(i, q.At(i))
	}
	return nil
}

// MarshalText writes "float32" or "float64".
func (p Precision) MarshalText() ([]byte, error) {
	if !p.Valid() {
		return nil, fmt.Errorf("layers: unknown precision %d", uint8(p))
	}
	return []byte(p.String()), nil
}

// UnmarshalText reads "float32" or "float64".
func (p *Precision) UnmarshalText(b []byte) error {
	switch string(b) {
	case "float32":
		*p = Float32
	case "float64":
		*p = Float64
	default:
		return fmt.Errorf("layers: unknown precision %q", b)
	}
	return nil
}
