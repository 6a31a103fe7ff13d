package engine

import (
	"fmt"
	"github.com/quernlab/quern/internal/kernel/vec"
	"hash/fnv"
	"math"

	"github.com/chewxy/hm"
	"github.com/chewxy/math32"
	"github.com/quernlab/quern/internal/kernel/par"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// Fused element-wise operations, each one tape instruction forward and one
// backward instead of a chain of gorgonia's, computed in the tensor's own
// precision (gorgonia's float32 softplus goes through float64 exp and
// log1p per element).

// bceLogitsOp computes max(x,0) - x*y + log1p(exp(-|x|)) element-wise: the
// binary cross-entropy of sigmoid(x) against y, finite for any x. Its
// gradient is sigmoid(x) - y with respect to x and -x with respect to y.
type bceLogitsOp struct{ opBase }

// bceLogitsGradOp computes (sigmoid(x) - y) * g element-wise.
type bceLogitsGradOp struct{ opBase }

func fusedType(arity int) hm.Type {
	a := hm.TypeVariable('a')
	t := G.TensorType{Dims: 2, Of: a}
	ts := make([]hm.Type, arity+1)
	for i := range ts {
		ts[i] = t
	}
	return hm.NewFnType(ts...)
}

// opType is the type of an operation from a signature such as "tta":
// 't' a matrix, 'a' a scalar, of one element type; the last letter is the
// result.
func opType(sig string) hm.Type {
	a := hm.TypeVariable('a')
	t := G.TensorType{Dims: 2, Of: a}
	ts := make([]hm.Type, len(sig))
	for i, c := range sig {
		if c == 't' {
			ts[i] = t
		} else {
			ts[i] = a
		}
	}
	return hm.NewFnType(ts...)
}

// firstShape is the shape of input 0, a matrix.
func firstShape(in []G.DimSizer) (tensor.Shape, error) {
	s, err := shape2(in, 0)
	if err != nil {
		return nil, err
	}
	return s.Clone(), nil
}

// reductionShape checks that the inputs share one shape and gives the
// scalar shape of their reduction.
func reductionShape(in []G.DimSizer) (tensor.Shape, error) {
	if _, err := shapeOf(in); err != nil {
		return nil, err
	}
	return tensor.ScalarShape(), nil
}

// upstream32 and upstream64 read a scalar upstream gradient.
func upstream32(v G.Value, what string) (float32, error) {
	g, ok := v.(*G.F32)
	if !ok {
		return 0, fmt.Errorf("engine: %s scale is %T", what, v)
	}
	return float32(*g), nil
}

func upstream64(v G.Value, what string) (float64, error) {
	g, ok := v.(*G.F64)
	if !ok {
		return 0, fmt.Errorf("engine: %s scale is %T", what, v)
	}
	return float64(*g), nil
}

func hashOf(s string) uint32 {
	h := fnv.New32a()
	h.Write([]byte(s))
	return h.Sum32()
}

func (op bceLogitsOp) SymDiff(inputs G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	gx, err := G.ApplyOp(bceLogitsGradOp{fused("BCEWithLogitsGrad", "tttt", shapesAgree)}, inputs[0], inputs[1], grad)
	if err != nil {
		return nil, err
	}
	nx, err := G.Neg(inputs[0])
	if err != nil {
		return nil, err
	}
	gy, err := G.HadamardProd(nx, grad)
	if err != nil {
		return nil, err
	}
	return G.Nodes{gx, gy}, nil
}

func (op bceLogitsOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op bceLogitsOp) UsePreallocDo(prealloc G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(prealloc, in, 2, false, func(o []float32, x [3][]float32, _ float32, _ int) {
		xs, ys := x[0], x[1]
		if par.Worth(len(xs)) {
			par.For(len(xs), func(lo, hi int) { bceLogits32(o[lo:hi], xs[lo:hi], ys[lo:hi]) })
		} else {
			bceLogits32(o, xs, ys)
		}
	}, func(o []float64, x [3][]float64, _ float64, _ int) {
		xs, ys := x[0], x[1]
		ys, o = ys[:len(xs)], o[:len(xs)]
		for i, v := range xs {
			o[i] = math.Max(v, 0) - v*ys[i] + math.Log1p(math.Exp(-math.Abs(v)))
		}
	})
}

func (op bceLogitsGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op bceLogitsGradOp) UsePreallocDo(prealloc G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(prealloc, in, 3, false, func(o []float32, x [3][]float32, _ float32, _ int) {
		xs, ys, gs := x[0], x[1], x[2]
		if par.Worth(len(xs)) {
			par.For(len(xs), func(lo, hi int) { bceLogitsGrad32(o[lo:hi], xs[lo:hi], ys[lo:hi], gs[lo:hi]) })
		} else {
			bceLogitsGrad32(o, xs, ys, gs)
		}
	}, func(o []float64, x [3][]float64, _ float64, _ int) {
		xs, ys, gs := x[0], x[1], x[2]
		ys, gs, o = ys[:len(xs)], gs[:len(xs)], o[:len(xs)]
		for i, v := range xs {
			var s float64
			if v >= 0 {
				s = 1 / (1 + math.Exp(-v))
			} else {
				e := math.Exp(v)
				s = e / (1 + e)
			}
			o[i] = (s - ys[i]) * gs[i]
		}
	})
}

func shapeOf(in []G.DimSizer) (tensor.Shape, error) {
	if len(in) == 0 {
		return nil, fmt.Errorf("engine: no input shapes")
	}
	s, ok := in[0].(tensor.Shape)
	if !ok {
		return nil, fmt.Errorf("engine: input shape is %T", in[0])
	}
	for _, o := range in[1:] {
		if t, ok := o.(tensor.Shape); !ok || !t.Eq(s) {
			return nil, fmt.Errorf("engine: fused operation on shapes %v and %v", s, o)
		}
	}
	return s.Clone(), nil
}

func denseArgs(in []G.Value, n int) ([4]*tensor.Dense, error) {
	var out [4]*tensor.Dense
	if len(in) != n || n > len(out) {
		return out, fmt.Errorf("engine: fused operation wants %d inputs, got %d", n, len(in))
	}
	for i, v := range in {
		d, ok := v.(*tensor.Dense)
		if !ok {
			return out, fmt.Errorf("engine: fused operation input %d is %T", i, v)
		}
		if i > 0 && (d.Dtype() != out[0].Dtype() || d.DataSize() != out[0].DataSize()) {
			return out, fmt.Errorf("engine: fused operation inputs differ in type or size")
		}
		out[i] = d
	}
	return out, nil
}

// BCEWithLogits is the element-wise binary cross-entropy of sigmoid(x)
// against targets y, max(x,0) - x*y + log1p(exp(-|x|)), as one fused
// operation whose gradient with respect to x is sigmoid(x) - y.
func (gr *Graph) BCEWithLogits(x, y *Node) *Node {
	if !gr.ok(x, y) {
		return &Node{g: gr}
	}
	if err := sameShape("bce_logits", x, y); err != nil {
		return gr.fail("bce_logits", err)
	}
	n, err := G.ApplyOp(bceLogitsOp{fused("BCEWithLogits", "ttt", shapesAgree)}, x.n, y.n)
	return gr.wrap("bce_logits", n, err, x.rows, x.cols)
}

// bceLogits32 writes max(x,0) - x*y + log1p(exp(-|x|)) into o.
func bceLogits32(o, xs, ys []float32) {
	o, ys = o[:len(xs)], ys[:len(xs)]
	for i, v := range xs {
		o[i] = math32.Max(v, 0) - v*ys[i] + vec.Log1pExpNeg32(math32.Abs(v))
	}
}

// bceLogitsGrad32 writes (sigmoid(x) - y) * g into o.
func bceLogitsGrad32(o, xs, ys, gs []float32) {
	o, ys, gs = o[:len(xs)], ys[:len(xs)], gs[:len(xs)]
	for i, v := range xs {
		var s float32
		if v >= 0 {
			s = 1 / (1 + vec.ExpNeg32(v))
		} else {
			e := vec.ExpNeg32(-v)
			s = e / (1 + e)
		}
		o[i] = (s - ys[i]) * gs[i]
	}
}
