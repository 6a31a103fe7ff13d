package engine

import (
	"fmt"
	"math"

	"github.com/chewxy/hm"
	"github.com/quernlab/quern/internal/kernel/par"
	"github.com/quernlab/quern/internal/kernel/vec"
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
	switch kind {
	case squashTanh:
		vec.ApplyTanh(o, xs)
	case squashSoftplus:
		vec.ApplySoftplus(o, xs)
	default:
		vec.ApplySigmoid(o, xs)
	}
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
				o32[i] = g32[i] * vec.Sigmoid32(v)
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
