package engine

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/internal/kernel/par"
	"github.com/quernlab/quern/internal/kernel/vec"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// bceSumOp is the sum over all elements of the binary cross-entropy on
// logits, max(x,0) - x y + log1p(exp(-|x|)), a scalar. The VAE's
// reconstruction term is this sum over a batch of images: fused, one pass
// computes exp(-|x|) once per element for both the loss and its gradient,
// which it leaves in a buffer shared with its gradient operation, and
// neither the element-wise losses nor a broadcast copy of the scalar
// gradient are materialised.
type bceSumOp struct {
	opBase
	side *bceSide
}

// bceSide holds sigmoid(x) - y from the last forward run.
type bceSide struct {
	d32     []float32
	d64     []float64
	partial []float64
}

// bceBlock is the number of elements summed in float64 per partial sum;
// the partial sums are added in order, so the loss does not depend on the
// number of goroutines.
const bceBlock = 4096

func (op bceSumOp) Do(in ...G.Value) (G.Value, error) {
	x, err := denseArgs(in, 2)
	if err != nil {
		return nil, err
	}
	n := x[0].DataSize()
	sd := op.side
	nb := (n + bceBlock - 1) / bceBlock
	if cap(sd.partial) < nb {
		sd.partial = make([]float64, nb)
	}
	part := sd.partial[:nb]
	switch x[0].Dtype() {
	case tensor.Float32:
		xs, ys := f32(x[0]), f32(x[1])
		if cap(sd.d32) < n {
			sd.d32 = make([]float32, n)
		}
		d := sd.d32[:n]
		if par.Worth(n) {
			par.Blocks(n, bceBlock, func(lo, hi int) { bceSumBlocks32(part, d, xs, ys, lo, hi) })
		} else {
			bceSumBlocks32(part, d, xs, ys, 0, n)
		}
		var s float64
		for _, p := range part {
			s += p
		}
		return op.scalar32(float32(s)), nil
	case tensor.Float64:
		xs, ys := f64(x[0]), f64(x[1])
		if cap(sd.d64) < n {
			sd.d64 = make([]float64, n)
		}
		d := sd.d64[:n]
		var s float64
		for i, v := range xs {
			e := math.Exp(-math.Abs(v))
			s += math.Max(v, 0) - v*ys[i] + math.Log1p(e)
			if v >= 0 {
				d[i] = 1/(1+e) - ys[i]
			} else {
				d[i] = e/(1+e) - ys[i]
			}
		}
		return op.scalar64(s), nil
	}
	return nil, fmt.Errorf("engine: BCE sum of %v", x[0].Dtype())
}

// bceSumBlocks32 handles elements [lo, hi) (whole blocks): each block's
// loss sum goes into part, sigmoid(x) - y into d.
func bceSumBlocks32(part []float64, d, xs, ys []float32, lo, hi int) {
	const one = 0x3f800000
	for b := lo; b < hi; b += bceBlock {
		end := min(b+bceBlock, hi)
		x, y, dd := xs[b:end], ys[b:end], d[b:end]
		y, dd = y[:len(x)], dd[:len(x)]
		// the vector kernel where the CPU has one, then the rest here
		acc, done := vec.BCE(dd, x, y)
		x, y, dd = x[done:], y[done:], dd[done:]
		var s float32
		for i, v := range x {
			bits := math.Float32bits(v)
			a := math.Float32frombits(bits &^ (1 << 31)) // |v|
			e := vec.ExpNeg32(a)
			// log(1+e) = 2 atanh(e/(2+e)), a series in t = e/(2+e) <= 1/3
			t := e / (2 + e)
			t2 := t * t
			l := 2 * t * (1 + t2*(1.0/3+t2*(1.0/5+t2*(1.0/7+t2*(1.0/9+t2*(1.0/11+t2*(1.0/13)))))))
			pos := v
			if pos < 0 {
				pos = 0
			}
			s += pos - v*y[i] + l
			// sigmoid(v) = 1/(1+e) for v >= 0, e/(1+e) below: pick the
			// factor 1 or e by the sign bit instead of a branch
			m := uint32(int32(bits) >> 31)
			f := math.Float32frombits(one ^ ((one ^ math.Float32bits(e)) & m))
			dd[i] = f/(1+e) - y[i]
			if i&63 == 63 {
				acc += float64(s)
				s = 0
			}
		}
		part[b/bceBlock] = acc + float64(s)
	}
}

func (op bceSumOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	gx, err := G.ApplyOp(bceSumGradOp{fused("BCESumGrad", "taat", firstInputShape), op.side}, in[0], grad, output)
	if err != nil {
		return nil, err
	}
	// with respect to y: -x g; y is a target, so this is never run
	gy, err := G.Mul(grad, in[0])
	if err != nil {
		return nil, err
	}
	gy, err = G.Neg(gy)
	if err != nil {
		return nil, err
	}
	return G.Nodes{gx, gy}, nil
}

// bceSumGradOp is g (sigmoid(x) - y) for the scalar upstream gradient g,
// read from the values its forward operation left. Its inputs are x (for
// the shape), g, and the forward's output, which orders it after the
// forward run.
type bceSumGradOp struct {
	opBase
	side *bceSide
}

func (op bceSumGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op bceSumGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	var stale bool
	out, err := op.elementwise(p, in, 1, true, func(o []float32, _ [3][]float32, k float32, _ int) {
		d := op.side.d32
		if stale = len(d) != len(o); stale {
			return
		}
		if par.Worth(len(o)) {
			par.For(len(o), func(lo, hi int) { scaleInto(o[lo:hi], d[lo:hi], k) })
		} else {
			scaleInto(o, d, k)
		}
	}, func(o []float64, _ [3][]float64, k float64, _ int) {
		d := op.side.d64
		if stale = len(d) != len(o); !stale {
			scaleInto(o, d, k)
		}
	})
	if err == nil && stale {
		err = fmt.Errorf("engine: BCE sum gradient before its forward run")
	}
	return out, err
}

func scaleInto[T float32 | float64](o, d []T, k T) {
	d = d[:len(o)]
	for i, v := range d {
		o[i] = k * v
	}
}

// BCEWithLogitsSum is the sum over all elements of the binary
// cross-entropy of sigmoid(x) against targets y, one fused operation whose
// gradient with respect to x is sigmoid(x) - y.
func (gr *Graph) BCEWithLogitsSum(x, y *Node) *Node {
	if !gr.ok(x, y) {
		return &Node{g: gr}
	}
	if err := sameShape("bce_logits_sum", x, y); err != nil {
		return gr.fail("bce_logits_sum", err)
	}
	if x.IsScalar() {
		return gr.fail("bce_logits_sum", fmt.Errorf("scalar operands"))
	}
	n, err := G.ApplyOp(bceSumOp{fused("BCEWithLogitsSum", "tta", reduction), &bceSide{}}, x.n, y.n)
	return gr.wrap("bce_logits_sum", n, err, 0, 0)
}
