package engine

import (
	"fmt"
	"github.com/quernlab/quern/internal/kernel/vec"

	"github.com/chewxy/hm"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
	"math"
)

// Fused operations of a VAE's latent layer: a column slice (the mean and
// log-variance halves of the encoder's output) with its gradient, the
// reparameterised sample z = mu + exp(lv/2) eps with its gradients, and the
// closed-form KL divergence of N(mu, exp(lv)) from N(0, 1) with its
// gradients. gorgonia's slice materialises a fresh copy every run and its
// gradient allocates a zeroed tensor; the sample and the KL would be a
// dozen element-wise instructions each way.

// sliceColsOp takes columns [from, to) of a matrix.
type sliceColsOp struct {
	opBase
	from, to int
}

func (sliceColsOp) Arity() int         { return 1 }
func (sliceColsOp) Type() hm.Type      { return fusedType(1) }
func (sliceColsOp) DiffWRT(int) []bool { return []bool{true} }
func (op sliceColsOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	s, err := shape2(in, 0)
	if err != nil {
		return nil, err
	}
	if op.from < 0 || op.to > s[1] || op.from >= op.to {
		return nil, fmt.Errorf("engine: columns [%d,%d) of %v", op.from, op.to, s)
	}
	return tensor.Shape{s[0], op.to - op.from}, nil
}

func (op sliceColsOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op sliceColsOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	t, err := tensors(in, 1)
	if err != nil {
		return nil, err
	}
	r, c := dims(t[0])
	w := op.to - op.from
	if op.to > c {
		return nil, fmt.Errorf("engine: columns [%d,%d) of a %dx%d matrix", op.from, op.to, r, c)
	}
	out := op.out(p, t[0].Dtype(), r, w)
	switch t[0].Dtype() {
	case tensor.Float32:
		copyCols(f32(out), f32(t[0]), r, c, op.from, w)
	case tensor.Float64:
		copyCols(f64(out), f64(t[0]), r, c, op.from, w)
	default:
		return nil, fmt.Errorf("engine: slice of %v", t[0].Dtype())
	}
	return out, nil
}

func (op sliceColsOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	g, err := G.ApplyOp(sliceColsGradOp{fused(fmt.Sprintf("SliceColsGrad[%d:%d]", op.from, op.to), "ttt", firstInputShape), op.from, op.to}, in[0], grad)
	if err != nil {
		return nil, err
	}
	return G.Nodes{g}, nil
}

// copyCols copies w columns of src (r x c) starting at column from into
// dst (r x w).
func copyCols[T float32 | float64](dst, src []T, r, c, from, w int) {
	for i := 0; i < r; i++ {
		copy(dst[i*w:i*w+w], src[i*c+from:i*c+from+w])
	}
}

// sliceColsGradOp places the gradient of a column slice into a zero matrix
// of the sliced matrix's shape; its inputs are that matrix (for the shape)
// and the slice's gradient.
type sliceColsGradOp struct {
	opBase
	from, to int
}

func (op sliceColsGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op sliceColsGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	if len(in) != 2 {
		return nil, fmt.Errorf("engine: slice gradient wants 2 inputs, got %d", len(in))
	}
	t, err := tensors(in, 2)
	if err != nil {
		return nil, err
	}
	r, c := dims(t[0])
	w := op.to - op.from
	if gr, gc := dims(t[1]); gr != r || gc != w || op.to > c {
		return nil, fmt.Errorf("engine: slice gradient %dx%d for columns [%d,%d) of %dx%d", gr, gc, op.from, op.to, r, c)
	}
	out := op.out(p, t[0].Dtype(), r, c)
	switch t[0].Dtype() {
	case tensor.Float32:
		o := f32(out)
		clear(o)
		placeCols(o, f32(t[1]), r, c, op.from, w)
	case tensor.Float64:
		o := f64(out)
		clear(o)
		placeCols(o, f64(t[1]), r, c, op.from, w)
	default:
		return nil, fmt.Errorf("engine: slice gradient of %v", t[0].Dtype())
	}
	return out, nil
}

func placeCols[T float32 | float64](dst, src []T, r, c, from, w int) {
	for i := 0; i < r; i++ {
		copy(dst[i*c+from:i*c+from+w], src[i*w:i*w+w])
	}
}

// reparamOp is z = mu + exp(lv/2) * eps, element-wise.
type reparamOp struct{ opBase }

func (op reparamOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op reparamOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 3, false, func(o []float32, x [3][]float32, _ float32, _ int) {
		mu, lv, eps := x[0], x[1], x[2]
		for i, m := range mu {
			o[i] = m + vec.Exp32(0.5*lv[i])*eps[i]
		}
	}, func(o []float64, x [3][]float64, _ float64, _ int) {
		mu, lv, eps := x[0], x[1], x[2]
		for i, m := range mu {
			o[i] = m + math.Exp(0.5*lv[i])*eps[i]
		}
	})
}

// SymDiff: dz/dmu is the identity, dz/dlv = eps exp(lv/2) / 2 and
// dz/deps = exp(lv/2); the last is built but, with eps an input, never run.
func (op reparamOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	glv, err := G.ApplyOp(reparamGradOp{fused("ReparamGradLogVar", "tttt", shapesAgree), true}, in[1], in[2], grad)
	if err != nil {
		return nil, err
	}
	geps, err := G.ApplyOp(reparamGradOp{fused("ReparamGradEps", "tttt", shapesAgree), false}, in[1], in[2], grad)
	if err != nil {
		return nil, err
	}
	return G.Nodes{grad, glv, geps}, nil
}

// reparamGradOp is, for inputs (lv, eps, g), g eps exp(lv/2) / 2 when
// logVar is set, else g exp(lv/2).
type reparamGradOp struct {
	opBase
	logVar bool
}

func (op reparamGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op reparamGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 3, false, func(o []float32, x [3][]float32, _ float32, _ int) {
		lv, eps, g := x[0], x[1], x[2]
		for i, l := range lv {
			s := vec.Exp32(0.5 * l)
			if op.logVar {
				o[i] = g[i] * eps[i] * s * 0.5
			} else {
				o[i] = g[i] * s
			}
		}
	}, func(o []float64, x [3][]float64, _ float64, _ int) {
		lv, eps, g := x[0], x[1], x[2]
		for i, l := range lv {
			s := math.Exp(0.5 * l)
			if op.logVar {
				o[i] = g[i] * eps[i] * s * 0.5
			} else {
				o[i] = g[i] * s
			}
		}
	})
}

// klOp is the KL divergence of N(mu, exp(lv)) from N(0, 1), summed over
// the elements and divided by the row count: with rows as examples and
// columns as latent dimensions, the mean over examples of the KL of each
// example's diagonal Gaussian from the standard normal. Each element
// contributes (mu^2 + exp(lv) - 1 - lv) / 2.
type klOp struct{ opBase }

func (op klOp) Do(in ...G.Value) (G.Value, error) {
	x, err := denseArgs(in, 2)
	if err != nil {
		return nil, err
	}
	r, _ := dims(x[0])
	if r == 0 {
		return nil, fmt.Errorf("engine: KL of an empty matrix")
	}
	switch x[0].Dtype() {
	case tensor.Float32:
		mu, lv := f32(x[0]), f32(x[1])
		var s float64
		for i, m := range mu {
			l := lv[i]
			s += float64(m*m + vec.Exp32(l) - 1 - l)
		}
		return op.scalar32(float32(0.5 * s / float64(r))), nil
	case tensor.Float64:
		mu, lv := f64(x[0]), f64(x[1])
		var s float64
		for i, m := range mu {
			l := lv[i]
			s += m*m + math.Exp(l) - 1 - l
		}
		return op.scalar64(0.5 * s / float64(r)), nil
	}
	return nil, fmt.Errorf("engine: KL of %v", x[0].Dtype())
}

func (op klOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	gmu, err := G.ApplyOp(klGradOp{fused("KLGradMean", "tat", firstInputShape), false}, in[0], grad)
	if err != nil {
		return nil, err
	}
	glv, err := G.ApplyOp(klGradOp{fused("KLGradLogVar", "tat", firstInputShape), true}, in[1], grad)
	if err != nil {
		return nil, err
	}
	return G.Nodes{gmu, glv}, nil
}

// klGradOp is, for inputs (v, g) with g the scalar upstream gradient,
// g mu / rows for the mean (v = mu) or g (exp(lv) - 1) / (2 rows) for the
// log-variance (v = lv).
type klGradOp struct {
	opBase
	logVar bool
}

func (op klGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op klGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 1, true, func(o []float32, x [3][]float32, g float32, rows int) {
		k := g / float32(rows)
		for i, e := range x[0] {
			if op.logVar {
				o[i] = k * 0.5 * (vec.Exp32(e) - 1)
			} else {
				o[i] = k * e
			}
		}
	}, func(o []float64, x [3][]float64, g float64, rows int) {
		k := g / float64(rows)
		for i, e := range x[0] {
			if op.logVar {
				o[i] = k * 0.5 * (math.Exp(e) - 1)
			} else {
				o[i] = k * e
			}
		}
	})
}

// Reparameterise is z = mu + exp(lv/2) * eps, one fused operation whose
// gradient reaches mu and lv (eps is normally an input filled with
// standard normal draws each step).
func (gr *Graph) Reparameterise(mu, lv, eps *Node) *Node {
	if !gr.ok(mu, lv, eps) {
		return &Node{g: gr}
	}
	if err := sameShape("reparameterise", mu, lv); err != nil {
		return gr.fail("reparameterise", err)
	}
	if err := sameShape("reparameterise", mu, eps); err != nil {
		return gr.fail("reparameterise", err)
	}
	n, err := G.ApplyOp(reparamOp{fused("Reparam", "tttt", shapesAgree)}, mu.n, lv.n, eps.n)
	return gr.wrap("reparameterise", n, err, mu.rows, mu.cols)
}

// KLStdNormal is the closed-form KL divergence of the diagonal Gaussians
// N(mu, exp(lv)) (one per row) from N(0, I), summed over columns and
// averaged over rows: sum (mu^2 + exp(lv) - 1 - lv) / (2 rows). One fused
// operation.
func (gr *Graph) KLStdNormal(mu, lv *Node) *Node {
	if !gr.ok(mu, lv) {
		return &Node{g: gr}
	}
	if err := sameShape("kl", mu, lv); err != nil {
		return gr.fail("kl", err)
	}
	if mu.IsScalar() {
		return gr.fail("kl", fmt.Errorf("scalar operands"))
	}
	n, err := G.ApplyOp(klOp{fused("KLStdNormal", "tta", reduction)}, mu.n, lv.n)
	return gr.wrap("kl", n, err, 0, 0)
}
