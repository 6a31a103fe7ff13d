package engine

import (
	"fmt"
	"math"

	"github.com/chewxy/hm"
	"github.com/chewxy/math32"
	"github.com/quernlab/quern/internal/par"
	"github.com/quernlab/quern/internal/vec"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// Fused tanh and sigmoid: one operation forward, and one backward that
// reads the forward's output (tanh' = 1 - y^2, sigmoid' = y (1 - y)),
// each writing into a buffer of its own node; gorgonia's own allocate a
// fresh tensor every run and differentiate through three more operations.

type squash int

const (
	squashTanh squash = iota
	squashSigmoid
	squashSoftplus // log(1 + exp(x)); its gradient sigmoid(x) reads x
)

func (s squash) String() string {
	switch s {
	case squashTanh:
		return "Tanh"
	case squashSigmoid:
		return "Sigmoid"
	}
	return "Softplus"
}

type squashOp struct {
	opBase
	kind squash
}

func (squashOp) Arity() int         { return 1 }
func (squashOp) Type() hm.Type      { return fusedType(1) }
func (squashOp) DiffWRT(int) []bool { return []bool{true} }
func (squashOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	return shapeOf(in)
}

func (op squashOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op squashOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	t, err := tensors(in, 1)
	if err != nil {
		return nil, err
	}
	r, c := dims(t[0])
	out := op.out(p, t[0].Dtype(), r, c)
	switch t[0].Dtype() {
	case tensor.Float32:
		xs, o := f32(t[0]), f32(out)
		if par.Worth(len(xs)) {
			par.For(len(xs), func(lo, hi int) { squash32(o[lo:hi], xs[lo:hi], op.kind) })
		} else {
			squash32(o, xs, op.kind)
		}
	case tensor.Float64:
		xs, o := f64(t[0]), f64(out)
		o = o[:len(xs)]
		for i, v := range xs {
			switch op.kind {
			case squashTanh:
				o[i] = math.Tanh(v)
			case squashSigmoid:
				o[i] = sigmoid64(v)
			default:
				o[i] = math.Max(v, 0) + math.Log1p(math.Exp(-math.Abs(v)))
			}
		}
	default:
		return nil, fmt.Errorf("engine: %v of %v", op.kind, t[0].Dtype())
	}
	return out, nil
}

func squash32(o, xs []float32, kind squash) {
	o = o[:len(xs)]
	switch kind {
	case squashTanh:
		done := vec.Tanh(o, xs)
		for i, v := range xs[done:] {
			o[done+i] = tanh32(v)
		}
		return
	case squashSoftplus:
		for i, v := range xs {
			o[i] = math32.Max(v, 0) + log1pExpNeg32(math32.Abs(v))
		}
		return
	}
	for i, v := range xs {
		o[i] = sigmoid32(v)
	}
}

// tanh32 is the hyperbolic tangent in float32: its Taylor series to
// degree 13 below |x| = 0.35 (truncation below 2e-8 relative), else
// (1 - e)/(1 + e) with e = exp(-2|x|) >= 0.5 away from cancellation; the
// sign is copied from x.
func tanh32(x float32) float32 {
	bits := math.Float32bits(x)
	a := math.Float32frombits(bits &^ (1 << 31))
	var t float32
	if a < 0.35 {
		a2 := a * a
		t = a * (1 + a2*(-1.0/3+a2*(2.0/15+a2*(-17.0/315+a2*(62.0/2835+a2*(-1382.0/155925+a2*(21844.0/6081075)))))))
	} else {
		e := expNeg32(2 * a)
		t = (1 - e) / (1 + e)
	}
	return math.Float32frombits(math.Float32bits(t) | bits&(1<<31))
}

// sigmoid32 is 1/(1+exp(-v)) for v >= 0 and exp(v)/(1+exp(v)) below (no
// overflow), in float32.
func sigmoid32(v float32) float32 {
	e := expNeg32(math32.Abs(v))
	if v >= 0 {
		return 1 / (1 + e)
	}
	return e / (1 + e)
}

func sigmoid64(v float64) float64 {
	if v >= 0 {
		return 1 / (1 + math.Exp(-v))
	}
	e := math.Exp(v)
	return e / (1 + e)
}

func (op squashOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	from := output
	if op.kind == squashSoftplus {
		from = in[0]
	}
	g, err := G.ApplyOp(squashGradOp{base("Grad" + op.kind.String()), op.kind}, from, grad)
	if err != nil {
		return nil, err
	}
	return G.Nodes{g}, nil
}

// squashGradOp is g (1 - y^2) for tanh and g y (1 - y) for sigmoid, from
// the forward's output y and the upstream gradient g; for softplus it is
// g sigmoid(x) from the forward's input x.
type squashGradOp struct {
	opBase
	kind squash
}

func (squashGradOp) Arity() int    { return 2 }
func (squashGradOp) Type() hm.Type { return fusedType(2) }
func (squashGradOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	return shapeOf(in)
}

func (op squashGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op squashGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	t, err := tensors(in, 2)
	if err != nil {
		return nil, err
	}
	r, c := dims(t[0])
	out := op.out(p, t[0].Dtype(), r, c)
	switch t[0].Dtype() {
	case tensor.Float32:
		squashGrad(f32(out), f32(t[0]), f32(t[1]), op.kind)
	case tensor.Float64:
		squashGrad(f64(out), f64(t[0]), f64(t[1]), op.kind)
	default:
		return nil, fmt.Errorf("engine: %v gradient of %v", op.kind, t[0].Dtype())
	}
	return out, nil
}

func squashGrad[T float32 | float64](o, y, g []T, kind squash) {
	o, g = o[:len(y)], g[:len(y)]
	switch kind {
	case squashTanh:
		for i, v := range y {
			o[i] = g[i] * (1 - v*v)
		}
		return
	case squashSoftplus:
		if y32, ok := any(y).([]float32); ok {
			o32, g32 := any(o).([]float32), any(g).([]float32)
			for i, v := range y32 {
				o32[i] = g32[i] * sigmoid32(v)
			}
			return
		}
		for i, v := range y {
			o[i] = g[i] * T(sigmoid64(float64(v)))
		}
		return
	}
	for i, v := range y {
		o[i] = g[i] * v * (1 - v)
	}
}

func (gr *Graph) squash(x *Node, kind squash) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	if x.IsScalar() {
		return gr.fail(kind.String(), fmt.Errorf("scalar operand"))
	}
	n, err := G.ApplyOp(squashOp{base(kind.String()), kind}, x.n)
	return gr.wrap(kind.String(), n, err, x.rows, x.cols)
}
