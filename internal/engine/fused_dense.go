package engine

import (
	"fmt"
	"hash"
	"math"

	"github.com/chewxy/hm"
	"github.com/quernlab/quern/internal/kernel/par"
	"github.com/quernlab/quern/internal/kernel/vec"
	"gonum.org/v1/gonum/blas"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// Fused dense-layer operations: the affine map x W + b in one instruction
// (the bias is added row by row instead of being broadcast into a copy),
// its three gradients, and leaky ReLU (ReLU at slope 0) with its gradient.

// opBase holds what every fused operation answers the same way, and the
// operation's output buffer. gorgonia's tape machine forgets every result
// at Reset and would otherwise allocate a fresh tensor each run; each
// node has its own op value, so the buffer is reused run after run by the
// one node that owns it (a Program runs on one goroutine at a time).
type opBase struct {
	name  string
	cache *outCache
	// sig is the operation's type signature (see opType), from which
	// Arity and Type follow, and shape its rule for InferShape; ops made
	// with base alone answer those themselves.
	sig   string
	shape shapeRule
}

// shapeRule is how an operation's output shape follows from its inputs'.
type shapeRule uint8

const (
	// shapesAgree: every matrix input has one shape, the output's.
	shapesAgree shapeRule = iota
	// firstInputShape: the output has the first input's shape.
	firstInputShape
	// reduction: matrix inputs of one shape, a scalar output.
	reduction
)

type outCache struct {
	t    *tensor.Dense
	part []float64 // partial sums of a reduction
	s32  *G.F32
	s64  *G.F64
}

// scalar32 returns v in the node's own scalar value.
func (o opBase) scalar32(v float32) *G.F32 {
	if o.cache == nil {
		return G.NewF32(v)
	}
	if o.cache.s32 == nil {
		o.cache.s32 = new(G.F32)
	}
	*o.cache.s32 = G.F32(v)
	return o.cache.s32
}

// scalar64 returns v in the node's own scalar value.
func (o opBase) scalar64(v float64) *G.F64 {
	if o.cache == nil {
		return G.NewF64(v)
	}
	if o.cache.s64 == nil {
		o.cache.s64 = new(G.F64)
	}
	*o.cache.s64 = G.F64(v)
	return o.cache.s64
}

func base(name string) opBase { return opBase{name: name, cache: &outCache{}} }

// fused is base with a signature and a shape rule, which give the
// operation its Arity, Type, InferShape and DiffWRT (every input
// differentiable: see the last trap in DEVELOPERS.md).
func fused(name, sig string, shape shapeRule) opBase {
	o := base(name)
	o.sig, o.shape = sig, shape
	return o
}

func (o opBase) Arity() int           { return len(o.sig) - 1 }
func (o opBase) Type() hm.Type        { return opType(o.sig) }
func (o opBase) DiffWRT(n int) []bool { return trues(n) }

func (o opBase) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	switch o.shape {
	case firstInputShape:
		return firstShape(in)
	case reduction:
		return reductionShape(in)
	}
	var mats []G.DimSizer
	for i, c := range o.sig[:len(o.sig)-1] {
		if c == 't' && i < len(in) {
			mats = append(mats, in[i])
		}
	}
	return shapeOf(mats)
}

func trues(n int) []bool {
	b := make([]bool, n)
	for i := range b {
		b[i] = true
	}
	return b
}

// elementwise is the opening every element-wise fused operation shares:
// in holds the operation's arity of inputs, of which the first n are
// matrices of one element type and size and, when upstream is set, the
// next is the scalar upstream gradient g; the output takes the first
// input's shape (rows of them) and is written by the kernel of the element
// type.
func (o opBase) elementwise(p G.Value, in []G.Value, n int, upstream bool,
	k32 func(out []float32, x [3][]float32, g float32, rows int), k64 func(out []float64, x [3][]float64, g float64, rows int)) (G.Value, error) {
	if len(in) != o.Arity() || n > 3 {
		return nil, fmt.Errorf("engine: %s wants %d inputs, got %d", o.name, o.Arity(), len(in))
	}
	t, err := denseArgs(in[:n], n)
	if err != nil {
		return nil, err
	}
	r, c := dims(t[0])
	out := o.out(p, t[0].Dtype(), r, c)
	switch t[0].Dtype() {
	case tensor.Float32:
		var x [3][]float32
		var g float32
		for i := 0; i < n; i++ {
			x[i] = f32(t[i])
		}
		if upstream {
			if g, err = upstream32(in[n], o.name); err != nil {
				return nil, err
			}
		}
		k32(f32(out), x, g, r)
	case tensor.Float64:
		var x [3][]float64
		var g float64
		for i := 0; i < n; i++ {
			x[i] = f64(t[i])
		}
		if upstream {
			if g, err = upstream64(in[n], o.name); err != nil {
				return nil, err
			}
		}
		k64(f64(out), x, g, r)
	default:
		return nil, fmt.Errorf("engine: %s of %v", o.name, t[0].Dtype())
	}
	return out, nil
}

// out returns a rows x cols tensor of dt to write the result into: the
// machine's preallocated register when it fits, else the node's buffer.
func (o opBase) out(p G.Value, dt tensor.Dtype, rows, cols int) *tensor.Dense {
	want := tensor.Shape{rows, cols}
	if d, ok := p.(*tensor.Dense); ok && d.Dtype() == dt && d.Shape().Eq(want) {
		return d
	}
	if c := o.cache; c != nil {
		if c.t != nil && c.t.Dtype() == dt && c.t.Shape().Eq(want) {
			return c.t
		}
		c.t = tensor.New(tensor.WithShape(rows, cols), tensor.Of(dt))
		return c.t
	}
	return tensor.New(tensor.WithShape(rows, cols), tensor.Of(dt))
}

func (o opBase) ReturnsPtr() bool      { return false }
func (o opBase) CallsExtern() bool     { return false }
func (o opBase) OverwritesInput() int  { return -1 }
func (o opBase) WriteHash(h hash.Hash) { fmt.Fprint(h, "quern."+o.name) }
func (o opBase) Hashcode() uint32      { return hashOf("quern." + o.name) }
func (o opBase) String() string        { return o.name }

func shape2(in []G.DimSizer, i int) (tensor.Shape, error) {
	if i >= len(in) {
		return nil, fmt.Errorf("engine: missing input shape %d", i)
	}
	s, ok := in[i].(tensor.Shape)
	if !ok || len(s) != 2 {
		return nil, fmt.Errorf("engine: input %d is not a matrix (%v)", i, in[i])
	}
	return s, nil
}

func dims(t *tensor.Dense) (int, int) {
	s := t.Shape()
	if len(s) != 2 {
		return 0, 0
	}
	return s[0], s[1]
}

// gemmT computes c = op(a) op(b) for float32 or float64 tensors.
func gemmT(tA, tB blas.Transpose, m, n, k int, a, b, c *tensor.Dense) error {
	lda, ldb := k, n
	if tA == blas.Trans {
		lda = m
	}
	if tB == blas.Trans {
		ldb = k
	}
	switch c.Dtype() {
	case tensor.Float32:
		cs := f32(c)
		sgemm(tA, tB, m, n, k, 1, f32(a), lda, f32(b), ldb, 0, cs, n)
	case tensor.Float64:
		cs := f64(c)
		dgemm(tA, tB, m, n, k, 1, f64(a), lda, f64(b), ldb, 0, cs, n)
	default:
		return fmt.Errorf("engine: matrix product of %v", c.Dtype())
	}
	return nil
}

// affineOp: (x n x in, W in x out, b 1 x out) -> x W + b, or with leaky
// set leakyReLU(x W + b) at slope >= 0. In float32 the bias and the
// activation are applied by the matrix product's goroutines to each block
// of the product as they finish it (gemm.Finisher), while it is in their
// cache, instead of in two more passes over the whole output.
type affineOp struct {
	opBase
	leaky bool
	slope float64
	fin   *affineFinish
}

func newAffine() affineOp { return affineOp{opBase: base("Affine"), fin: new(affineFinish)} }

// newAffineLeaky is newAffine followed by leaky ReLU at slope (>= 0).
func newAffineLeaky(slope float64) affineOp {
	return affineOp{opBase: base(fmt.Sprintf("AffineLeakyReLU(%g)", slope)), leaky: true, slope: slope, fin: new(affineFinish)}
}

// affineFinish adds the bias to finished blocks of the product c (ldc
// columns) and applies leaky ReLU where leaky is set: per element the same
// operations as Affine followed by the separate LeakyReLU operation.
type affineFinish struct {
	c, b  []float32
	ldc   int
	leaky bool
	slope float32
}

func (f *affineFinish) Finish(i0, i1, j0, j1 int) {
	b := f.b[j0:j1]
	for i := i0; i < i1; i++ {
		row := f.c[i*f.ldc+j0 : i*f.ldc+j1]
		addTo32(row, b)
		if f.leaky {
			vec.ApplyLeaky(row, row, nil, f.slope)
		}
	}
}

func (affineOp) Arity() int         { return 3 }
func (affineOp) Type() hm.Type      { return fusedType(3) }
func (affineOp) DiffWRT(int) []bool { return []bool{true, true, true} }
func (affineOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	x, err := shape2(in, 0)
	if err != nil {
		return nil, err
	}
	w, err := shape2(in, 1)
	if err != nil {
		return nil, err
	}
	if x[1] != w[0] {
		return nil, fmt.Errorf("engine: affine of %v by %v", x, w)
	}
	return tensor.Shape{x[0], w[1]}, nil
}

func (op affineOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op affineOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	t, err := tensors(in, 3)
	if err != nil {
		return nil, err
	}
	n, k := dims(t[0])
	k2, m := dims(t[1])
	if k != k2 || t[2].DataSize() != m {
		return nil, fmt.Errorf("engine: affine shapes %v, %v, %v", t[0].Shape(), t[1].Shape(), t[2].Shape())
	}
	out := op.out(p, t[0].Dtype(), n, m)
	switch out.Dtype() {
	case tensor.Float32:
		f := op.fin
		f.c, f.b, f.ldc, f.leaky, f.slope = f32(out), f32(t[2])[:m], m, op.leaky, float32(op.slope)
		sgemmThen(blas.NoTrans, blas.NoTrans, n, m, k, 1, f32(t[0]), k, f32(t[1]), m, 0, f.c, m, f)
		f.c, f.b = nil, nil
	case tensor.Float64:
		if err := gemmT(blas.NoTrans, blas.NoTrans, n, m, k, t[0], t[1], out); err != nil {
			return nil, err
		}
		o := f64(out)
		addRows(o, f64(t[2])[:m], n)
		if op.leaky {
			leaky(o, o, nil, op.slope)
		}
	default:
		return nil, fmt.Errorf("engine: affine map of %v", out.Dtype())
	}
	return out, nil
}

func (op affineOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	if op.leaky {
		// the gradient through leaky ReLU at slope >= 0 needs only the
		// sign bits of its input, which its output keeps (slope*x with
		// x < 0 is negative or -0)
		g, err := G.ApplyOp(leakyGradOp{fused("Grad"+op.name, "ttt", shapesAgree), op.slope}, output, grad)
		if err != nil {
			return nil, err
		}
		grad = g
	}
	dx, err := G.ApplyOp(affineGradOp{base("AffineGradX"), 0}, grad, in[1])
	if err != nil {
		return nil, err
	}
	dw, err := G.ApplyOp(affineGradOp{base("AffineGradW"), 1}, in[0], grad)
	if err != nil {
		return nil, err
	}
	db, err := G.ApplyOp(affineGradOp{base("AffineGradB"), 2}, grad)
	if err != nil {
		return nil, err
	}
	return G.Nodes{dx, dw, db}, nil
}

// affineGradOp computes one gradient of the affine map: which 0 is
// grad W^T (inputs grad, W), 1 is x^T grad (inputs x, grad), 2 is the
// column sums of grad as a 1 x out row (input grad).
type affineGradOp struct {
	opBase
	which int
}

func (op affineGradOp) Arity() int {
	if op.which == 2 {
		return 1
	}
	return 2
}

func (op affineGradOp) Type() hm.Type { return fusedType(op.Arity()) }

func (op affineGradOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	a, err := shape2(in, 0)
	if err != nil {
		return nil, err
	}
	if op.which == 2 {
		return tensor.Shape{1, a[1]}, nil
	}
	b, err := shape2(in, 1)
	if err != nil {
		return nil, err
	}
	if op.which == 0 {
		return tensor.Shape{a[0], b[0]}, nil
	}
	return tensor.Shape{a[1], b[1]}, nil
}

func (op affineGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op affineGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	t, err := tensors(in, op.Arity())
	if err != nil {
		return nil, err
	}
	switch op.which {
	case 0: // grad (n x m) W^T (m x k)
		n, m := dims(t[0])
		k, m2 := dims(t[1])
		if m != m2 {
			return nil, fmt.Errorf("engine: affine gradient shapes %v, %v", t[0].Shape(), t[1].Shape())
		}
		out := op.out(p, t[0].Dtype(), n, k)
		return out, gemmT(blas.NoTrans, blas.Trans, n, k, m, t[0], t[1], out)
	case 1: // x^T (k x n) grad (n x m)
		n, k := dims(t[0])
		n2, m := dims(t[1])
		if n != n2 {
			return nil, fmt.Errorf("engine: affine gradient shapes %v, %v", t[0].Shape(), t[1].Shape())
		}
		out := op.out(p, t[0].Dtype(), k, m)
		return out, gemmT(blas.Trans, blas.NoTrans, k, m, n, t[0], t[1], out)
	}
	n, m := dims(t[0])
	out := op.out(p, t[0].Dtype(), 1, m)
	switch out.Dtype() {
	case tensor.Float32:
		o := f32(out)
		g := f32(t[0])
		if par.Worth(len(g)) && m >= 2*nr32 {
			// column ranges to each goroutine: every sum keeps its order
			par.Spread(m/nr32, func(lo, hi int) { colSumRange(o, g, n, m, lo*nr32, hi*nr32, hi == m/nr32) })
		} else {
			colSums(o, g, n)
		}
	case tensor.Float64:
		o := f64(out)
		colSums(o, f64(t[0]), n)
	}
	return out, nil
}

// leakyOp is x for x >= 0 and slope*x otherwise (ReLU at slope 0).
type leakyOp struct {
	opBase
	slope float64
}

func newLeaky(slope float64) leakyOp {
	return leakyOp{fused(fmt.Sprintf("LeakyReLU(%g)", slope), "tt", shapesAgree), slope}
}

func (op leakyOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op leakyOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 1, false, func(o []float32, x [3][]float32, _ float32, _ int) {
		xs := x[0]
		if par.Worth(len(xs)) {
			par.For(len(xs), func(lo, hi int) { leaky(o[lo:hi], xs[lo:hi], nil, float32(op.slope)) })
		} else {
			leaky(o, xs, nil, float32(op.slope))
		}
	}, func(o []float64, x [3][]float64, _ float64, _ int) { leaky(o, x[0], nil, op.slope) })
}

func (op leakyOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	g, err := G.ApplyOp(leakyGradOp{fused("Grad"+op.name, "ttt", shapesAgree), op.slope}, in[0], grad)
	if err != nil {
		return nil, err
	}
	return G.Nodes{g}, nil
}

// leakyGradOp is grad where x's sign bit is clear and slope*grad where it
// is set (-0 included); x may be the forward's input or, at slope >= 0,
// its output, which keeps the input's sign bits.
type leakyGradOp struct {
	opBase
	slope float64
}

func (op leakyGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op leakyGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	return op.elementwise(p, in, 2, false, func(o []float32, x [3][]float32, _ float32, _ int) {
		xs, g := x[0], x[1]
		if par.Worth(len(xs)) {
			par.For(len(xs), func(lo, hi int) { leaky(o[lo:hi], xs[lo:hi], g[lo:hi], float32(op.slope)) })
		} else {
			leaky(o, xs, g, float32(op.slope))
		}
	}, func(o []float64, x [3][]float64, _ float64, _ int) { leaky(o, x[0], x[1], op.slope) })
}

// addRows adds the row b to each of the rows of o (float64; float32
// products add their bias in affineFinish).
func addRows(o, b []float64, rows int) {
	m := len(b)
	for r := 0; r < rows; r++ {
		row := o[r*m : r*m+m]
		for j, v := range b {
			row[j] += v
		}
	}
}

// addTo32 adds x into o, eight lanes at a time where the CPU allows: the
// same additions, element by element, as the plain loop.
func addTo32(o, x []float32) {
	done := vec.Add(o, x)
	x = x[done:len(o)]
	o = o[done:]
	for j, v := range x {
		o[j] += v
	}
}

// nr32 is the width of the column ranges colSumRange is given.
const nr32 = 64

// colSumRange is colSums for columns [c0, c1) of the m-column matrix g
// (through column m when last is set).
func colSumRange(o, g []float32, rows, m, c0, c1 int, last bool) {
	if last {
		c1 = m
	}
	clear(o[c0:c1])
	for r := 0; r < rows; r++ {
		addTo32(o[c0:c1], g[r*m+c0:r*m+c1])
	}
}

// colSums sets o (one row) to the column sums of rows of g.
func colSums[T float32 | float64](o, g []T, rows int) {
	clear(o)
	m := len(o)
	if o32, ok := any(o).([]float32); ok {
		g32 := any(g).([]float32)
		for r := 0; r < rows; r++ {
			addTo32(o32, g32[r*m:r*m+m])
		}
		return
	}
	for r := 0; r < rows; r++ {
		for j, v := range g[r*m : r*m+m] {
			o[j] += v
		}
	}
}

// leaky writes x (or slope*x below zero) into o; with g given it writes
// the gradient instead: g where x's sign bit is clear, slope*g where it is
// set (-0 included, as in vec.ApplyLeaky; the output keeps the input's sign bit
// at slope >= 0, so the gradient can be taken from either).
func leaky[T float32 | float64](o, x, g []T, slope T) {
	if xs, ok := any(x).([]float32); ok {
		vec.ApplyLeaky(any(o).([]float32), xs, any(g).([]float32), float32(slope))
		return
	}
	o = o[:len(x)]
	if g == nil {
		for i, v := range x {
			if v < 0 {
				v *= slope
			}
			o[i] = v
		}
		return
	}
	g = g[:len(x)]
	for i, v := range x {
		if math.Signbit(float64(v)) {
			o[i] = slope * g[i]
		} else {
			o[i] = g[i]
		}
	}
}

// tensors checks that inputs are n dense tensors of one dtype.
func tensors(in []G.Value, n int) ([4]*tensor.Dense, error) {
	var out [4]*tensor.Dense
	if len(in) != n || n > len(out) {
		return out, fmt.Errorf("engine: fused operation wants %d inputs, got %d", n, len(in))
	}
	for i, v := range in {
		d, ok := v.(*tensor.Dense)
		if !ok {
			return out, fmt.Errorf("engine: fused operation input %d is %T", i, v)
		}
		if i > 0 && d.Dtype() != out[0].Dtype() {
			return out, fmt.Errorf("engine: fused operation inputs differ in type")
		}
		out[i] = d
	}
	return out, nil
}
