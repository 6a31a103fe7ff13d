package engine

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/internal/kernel/par"
	"github.com/quernlab/quern/internal/kernel/vec"
	G "gorgonia.org/gorgonia"
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

func (op squashOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op squashOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 1, false, func(o []float32, x [3][]float32, _ float32, _ int) {
		xs := x[0]
		if par.Worth(len(xs)) {
			par.For(len(xs), func(lo, hi int) { squash32(o[lo:hi], xs[lo:hi], op.kind) })
		} else {
			squash32(o, xs, op.kind)
		}
	}, func(o []float64, x [3][]float64, _ float64, _ int) {
		xs := x[0]
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
	})
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
	g, err := G.ApplyOp(squashGradOp{fused("Grad"+op.kind.String(), "ttt", shapesAgree), op.kind}, from, grad)
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

func (op squashGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op squashGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 2, false,
		func(o []float32, x [3][]float32, _ float32, _ int) { squashGrad(o, x[0], x[1], op.kind) },
		func(o []float64, x [3][]float64, _ float64, _ int) { squashGrad(o, x[0], x[1], op.kind) })
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
	n, err := G.ApplyOp(squashOp{fused(kind.String(), "tt", shapesAgree), kind}, x.n)
	return gr.wrap(kind.String(), n, err, x.rows, x.cols)
}
