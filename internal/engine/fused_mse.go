package engine

import (
	"fmt"

	"github.com/quernlab/quern/internal/kernel/par"
	"github.com/quernlab/quern/internal/kernel/vec"

	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// mseOp is the mean of (p - t)^2 over all elements, a scalar, in one
// instruction; its gradient is 2 (p - t) / N for p and the negative of
// that for t (gorgonia's Sub, Square and Sum would take three
// instructions forward, more backward, and broadcast the scalar gradient
// into a full copy).
type mseOp struct{ opBase }

// mseGradOp computes 2 (p - t) / N * g for the scalar upstream gradient g.
type mseGradOp struct{ opBase }

func (op mseOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	gp, err := G.ApplyOp(mseGradOp{fused("MSEGrad", "ttat", shapesAgree)}, in[0], in[1], grad)
	if err != nil {
		return nil, err
	}
	gt, err := G.Neg(gp)
	if err != nil {
		return nil, err
	}
	return G.Nodes{gp, gt}, nil
}

func (op mseOp) Do(in ...G.Value) (G.Value, error) {
	x, err := denseArgs(in, 2)
	if err != nil {
		return nil, err
	}
	switch x[0].Dtype() {
	case tensor.Float32:
		ps := f32(x[0])
		return op.scalar32(float32(op.sqErrBlocks32(ps, f32(x[1])) / float64(len(ps)))), nil
	case tensor.Float64:
		ps := f64(x[0])
		return op.scalar64(sqErr(ps, f64(x[1])) / float64(len(ps))), nil
	}
	return nil, fmt.Errorf("engine: MSE of %v", x[0].Dtype())
}

// sqErr sums (p - t)^2 in float64.
// sqErrBlocks32 is sqErr for float32 in blocks of bceBlock elements, each
// summed with four float64 accumulators (a single running sum is one long
// chain of dependent additions), the block sums added in order: the same
// value whatever the number of goroutines.
func (op mseOp) sqErrBlocks32(p, t []float32) float64 {
	n := len(p)
	nb := (n + bceBlock - 1) / bceBlock
	c := op.cache
	if c == nil {
		c = &outCache{}
	}
	if cap(c.part) < nb {
		c.part = make([]float64, nb)
	}
	part := c.part[:nb]
	if par.Worth(n) {
		par.Blocks(n, bceBlock, func(lo, hi int) { sqErrRange(part, p, t, lo, hi) })
	} else {
		sqErrRange(part, p, t, 0, n)
	}
	var s float64
	for _, v := range part {
		s += v
	}
	return s
}

func sqErrRange(part []float64, p, t []float32, lo, hi int) {
	for b := lo; b < hi; b += bceBlock {
		ps := p[b:min(b+bceBlock, hi)]
		ts := t[b : b+len(ps)]
		// the vector kernel first where the CPU has one: the same lanes,
		// order and roundings as the loop below
		var acc [4]float64
		i := vec.SqErr(&acc, ps, ts)
		s0, s1, s2, s3 := acc[0], acc[1], acc[2], acc[3]
		for ; i+4 <= len(ps); i += 4 {
			d0 := float64(ps[i]) - float64(ts[i])
			d1 := float64(ps[i+1]) - float64(ts[i+1])
			d2 := float64(ps[i+2]) - float64(ts[i+2])
			d3 := float64(ps[i+3]) - float64(ts[i+3])
			// each square rounded (a conversion stops the compiler
			// fusing it into the sum), as in the kernel
			s0 += float64(d0 * d0)
			s1 += float64(d1 * d1)
			s2 += float64(d2 * d2)
			s3 += float64(d3 * d3)
		}
		for ; i < len(ps); i++ {
			d := float64(ps[i]) - float64(ts[i])
			s0 += float64(d * d)
		}
		part[b/bceBlock] = (s0 + s1) + (s2 + s3)
	}
}

func sqErr[T float32 | float64](p, t []T) float64 {
	t = t[:len(p)]
	var s float64
	for i, v := range p {
		d := float64(v) - float64(t[i])
		s += d * d
	}
	return s
}

func (mseGradOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	if len(in) != 3 {
		return nil, fmt.Errorf("engine: MSE gradient wants 3 inputs")
	}
	return shapeOf(in[:2])
}

func (op mseGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op mseGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 2, true, func(o []float32, x [3][]float32, g float32, _ int) {
		ps, ts := x[0], x[1]
		k := 2 * g / float32(len(ps))
		if par.Worth(len(ps)) {
			par.For(len(ps), func(lo, hi int) { mseGrad(o[lo:hi], ps[lo:hi], ts[lo:hi], k) })
		} else {
			mseGrad(o, ps, ts, k)
		}
	}, func(o []float64, x [3][]float64, g float64, _ int) {
		mseGrad(o, x[0], x[1], 2*g/float64(len(x[0])))
	})
}

func mseGrad[T float32 | float64](o, p, t []T, k T) {
	o, t = o[:len(p)], t[:len(p)]
	if p32, ok := any(p).([]float32); ok {
		done := vec.ScaledDiff(any(o).([]float32), p32, any(t).([]float32), float32(k))
		o, p, t = o[done:], p[done:], t[done:]
	}
	for i, v := range p {
		o[i] = k * (v - t[i])
	}
}

// MSE is the mean of (p - t)^2 over all elements, as one fused operation.
func (gr *Graph) MSE(p, t *Node) *Node {
	if !gr.ok(p, t) {
		return &Node{g: gr}
	}
	if err := sameShape("mse", p, t); err != nil {
		return gr.fail("mse", err)
	}
	n, err := G.ApplyOp(mseOp{fused("MSE", "tta", reduction)}, p.n, t.n)
	return gr.wrap("mse", n, err, 0, 0)
}
