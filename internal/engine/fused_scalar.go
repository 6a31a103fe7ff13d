package engine

import (
	"fmt"

	"github.com/chewxy/hm"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// Fused reductions and scalar arithmetic: the sum of a matrix's elements,
// and +, -, x and scaling of scalars. gorgonia's own allocate a fresh
// scalar (and, for a sum's gradient, a broadcast matrix) every run; these
// keep one value per node, so the losses' glue allocates nothing.

// sumAllOp is the sum of all elements of a matrix, accumulated in
// float64 by four running sums (one would be a chain of dependent
// additions) in one goroutine.
type sumAllOp struct{ opBase }

func (op sumAllOp) Do(in ...G.Value) (G.Value, error) {
	x, err := denseArgs(in, 1)
	if err != nil {
		return nil, err
	}
	switch x[0].Dtype() {
	case tensor.Float32:
		return op.scalar32(float32(sum4(f32(x[0])))), nil
	case tensor.Float64:
		return op.scalar64(sum4(f64(x[0]))), nil
	}
	return nil, fmt.Errorf("engine: sum of %v", x[0].Dtype())
}

func (op sumAllOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	g, err := G.ApplyOp(fillOp{fused("SumGrad", "tat", firstInputShape)}, in[0], grad)
	if err != nil {
		return nil, err
	}
	return G.Nodes{g}, nil
}

// sum4 adds v in float64 with four running sums.
func sum4[T float32 | float64](v []T) float64 {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(v); i += 4 {
		s0 += float64(v[i])
		s1 += float64(v[i+1])
		s2 += float64(v[i+2])
		s3 += float64(v[i+3])
	}
	for ; i < len(v); i++ {
		s0 += float64(v[i])
	}
	return (s0 + s1) + (s2 + s3)
}

// fillOp is a matrix of input 0's shape with every element the scalar
// input 1: the gradient of a sum.
type fillOp struct{ opBase }

func (op fillOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op fillOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 1, true, func(o []float32, _ [3][]float32, g float32, _ int) {
		for i := range o {
			o[i] = g
		}
	}, func(o []float64, _ [3][]float64, g float64, _ int) {
		for i := range o {
			o[i] = g
		}
	})
}

// scalarOp is arithmetic on scalars: a+b, a-b, a*b, or c*a.
type scalarOp struct {
	opBase
	kind byte // '+', '-', '*', or 's' for scaling by c
	c    float64
}

func newScalarOp(kind byte, c float64) scalarOp {
	name := fmt.Sprintf("Scalar%c", kind)
	if kind == 's' {
		name = fmt.Sprintf("ScalarScale(%g)", c)
	}
	return scalarOp{base(name), kind, c}
}

func (op scalarOp) Arity() int {
	if op.kind == 's' {
		return 1
	}
	return 2
}

func (op scalarOp) Type() hm.Type {
	if op.kind == 's' {
		return opType("aa")
	}
	return opType("aaa")
}

func (op scalarOp) DiffWRT(int) []bool { return []bool{true, true}[:op.Arity()] }

func (scalarOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	return tensor.ScalarShape(), nil
}

func (op scalarOp) Do(in ...G.Value) (G.Value, error) {
	if len(in) != op.Arity() {
		return nil, fmt.Errorf("engine: %v wants %d inputs, got %d", op, op.Arity(), len(in))
	}
	switch a := in[0].(type) {
	case *G.F32:
		x := float32(*a)
		if op.kind == 's' {
			return op.scalar32(float32(op.c) * x), nil
		}
		y, err := upstream32(in[1], op.name)
		if err != nil {
			return nil, err
		}
		return op.scalar32(arith(op.kind, x, y)), nil
	case *G.F64:
		x := float64(*a)
		if op.kind == 's' {
			return op.scalar64(op.c * x), nil
		}
		y, err := upstream64(in[1], op.name)
		if err != nil {
			return nil, err
		}
		return op.scalar64(arith(op.kind, x, y)), nil
	}
	return nil, fmt.Errorf("engine: %v of %T", op, in[0])
}

func arith[T float32 | float64](kind byte, a, b T) T {
	switch kind {
	case '+':
		return a + b
	case '-':
		return a - b
	}
	return a * b
}

// SymDiff: d(a+b) = (g, g), d(a-b) = (g, -g), d(ab) = (g b, g a),
// d(ca) = c g.
func (op scalarOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	apply := func(o scalarOp, args ...*G.Node) (*G.Node, error) { return G.ApplyOp(o, args...) }
	switch op.kind {
	case 's':
		g, err := apply(newScalarOp('s', op.c), grad)
		return G.Nodes{g}, err
	case '+':
		return G.Nodes{grad, grad}, nil
	case '-':
		g, err := apply(newScalarOp('s', -1), grad)
		return G.Nodes{grad, g}, err
	}
	ga, err := apply(newScalarOp('*', 0), grad, in[1])
	if err != nil {
		return nil, err
	}
	gb, err := apply(newScalarOp('*', 0), grad, in[0])
	return G.Nodes{ga, gb}, err
}

// scalarArith applies a scalar operation, both operands scalars.
func (gr *Graph) scalarArith(name string, kind byte, c float64, xs ...*Node) *Node {
	if !gr.ok(xs...) {
		return &Node{g: gr}
	}
	ns := make([]*G.Node, len(xs))
	for i, x := range xs {
		ns[i] = x.n
	}
	n, err := G.ApplyOp(newScalarOp(kind, c), ns...)
	return gr.wrap(name, n, err, 0, 0)
}
