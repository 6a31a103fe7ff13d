package engine

import (
	"errors"
	"fmt"
	"sync"

	"github.com/quernlab/quern/layers"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// buildMu serialises graph construction and compilation: gorgonia shares
// package-level constant nodes between graphs.
var buildMu sync.Mutex

// Graph is a computation under construction.
type Graph struct {
	g        *G.ExprGraph
	prec     layers.Precision
	dt       tensor.Dtype
	params   []*layers.Param
	pnodes   map[*layers.Param]*G.Node
	inputs   []*inputSlot
	byInput  map[*Input]*inputSlot
	err      error
	unlock   func()
	compiled bool
}

// An Input is the handle of a graph input: made once with NewInput, placed
// in graphs with Graph.Input and filled in their programs through
// Program.F32 or Program.F64. A phase's graphs for every batch size share
// its handles.
type Input struct{ name string }

// NewInput returns a new input handle; the name appears in errors only.
func NewInput(name string) *Input { return &Input{name: name} }

// Name is the name the input was made with.
func (in *Input) Name() string { return in.name }

type inputSlot struct {
	name       string
	rows, cols int
	node       *G.Node
	t          *tensor.Dense
	f32        []float32
	f64        []float64
}

// Node is a value in a Graph: a matrix of Rows x Cols, or a scalar (0 x 0).
type Node struct {
	n          *G.Node
	g          *Graph
	rows, cols int
}

// Rows is the node's row count (0 for a scalar).
func (n *Node) Rows() int { return n.rows }

// Cols is the node's column count (0 for a scalar).
func (n *Node) Cols() int { return n.cols }

// IsScalar reports whether the node is a scalar.
func (n *Node) IsScalar() bool { return n.rows == 0 && n.cols == 0 }

// NewGraph starts a graph in the given precision. The caller must Compile
// or Discard it: construction holds a package-wide lock until then.
func NewGraph(prec layers.Precision) *Graph {
	buildMu.Lock()
	gr := &Graph{g: G.NewGraph(), prec: prec, pnodes: map[*layers.Param]*G.Node{}, byInput: map[*Input]*inputSlot{}, unlock: buildMu.Unlock}
	switch prec {
	case layers.Float32:
		gr.dt = tensor.Float32
	case layers.Float64:
		gr.dt = tensor.Float64
	default:
		gr.err = fmt.Errorf("engine: unknown precision %v", prec)
		gr.dt = tensor.Float32
	}
	return gr
}

// Err returns the first construction error.
func (gr *Graph) Err() error { return gr.err }

// Discard abandons construction and releases the build lock.
func (gr *Graph) Discard() {
	if gr.unlock != nil {
		gr.unlock()
		gr.unlock = nil
	}
}

func (gr *Graph) fail(op string, err error) *Node {
	if gr.err == nil {
		gr.err = fmt.Errorf("engine: %s: %w", op, err)
	}
	return &Node{g: gr}
}

func (gr *Graph) ok(ns ...*Node) bool {
	if gr.err != nil {
		return false
	}
	for _, n := range ns {
		if n == nil || n.n == nil {
			gr.fail("operand", errors.New("nil node"))
			return false
		}
		if n.g != gr {
			gr.fail("operand", errors.New("node belongs to another graph"))
			return false
		}
	}
	return true
}

func (gr *Graph) wrap(op string, n *G.Node, err error, rows, cols int) *Node {
	if err != nil {
		return gr.fail(op, err)
	}
	return &Node{n: n, g: gr, rows: rows, cols: cols}
}

// Input places the input in the graph as a rows x cols matrix, filled
// before each run through Program.F32 or Program.F64.
func (gr *Graph) Input(in *Input, rows, cols int) *Node {
	if gr.err != nil {
		return &Node{g: gr}
	}
	if in == nil {
		return gr.fail("input", errors.New("nil input handle"))
	}
	name := in.name
	if _, dup := gr.byInput[in]; dup {
		return gr.fail("input", fmt.Errorf("input %q placed twice", name))
	}
	if rows <= 0 || cols <= 0 {
		return gr.fail("input", fmt.Errorf("input %q has shape %dx%d", name, rows, cols))
	}
	s := &inputSlot{name: name, rows: rows, cols: cols}
	if gr.prec == layers.Float64 {
		s.f64 = make([]float64, rows*cols)
		s.t = tensor.New(tensor.WithShape(rows, cols), tensor.WithBacking(s.f64))
	} else {
		s.f32 = make([]float32, rows*cols)
		s.t = tensor.New(tensor.WithShape(rows, cols), tensor.WithBacking(s.f32))
	}
	s.node = G.NewMatrix(gr.g, gr.dt, G.WithShape(rows, cols), G.WithName("in:"+name), G.WithValue(s.t))
	gr.inputs = append(gr.inputs, s)
	gr.byInput[in] = s
	return &Node{n: s.node, g: gr, rows: rows, cols: cols}
}

// Param returns the node for p, whose storage the graph reads in place. The
// same parameter always maps to the same node within a graph.
func (gr *Graph) Param(p *layers.Param) *Node {
	if gr.err != nil {
		return &Node{g: gr}
	}
	r, c := p.Shape()
	if n, ok := gr.pnodes[p]; ok {
		return &Node{n: n, g: gr, rows: r, cols: c}
	}
	if p.Precision() != gr.prec {
		return gr.fail("param", fmt.Errorf("parameter %q is %v, graph is %v", p.Name(), p.Precision(), gr.prec))
	}
	var t *tensor.Dense
	if gr.prec == layers.Float64 {
		t = tensor.New(tensor.WithShape(r, c), tensor.WithBacking(p.F64()))
	} else {
		t = tensor.New(tensor.WithShape(r, c), tensor.WithBacking(p.F32()))
	}
	n := G.NewMatrix(gr.g, gr.dt, G.WithShape(r, c), G.WithName("p:"+p.Name()), G.WithValue(t))
	gr.pnodes[p] = n
	gr.params = append(gr.params, p)
	return &Node{n: n, g: gr, rows: r, cols: c}
}

// Const returns a scalar constant.
func (gr *Graph) Const(v float64) *Node {
	if gr.err != nil {
		return &Node{g: gr}
	}
	var n *G.Node
	if gr.prec == layers.Float64 {
		n = G.NewConstant(v)
	} else {
		n = G.NewConstant(float32(v))
	}
	return &Node{n: n, g: gr}
}

func sameShape(op string, a, b *Node) error {
	if a.rows != b.rows || a.cols != b.cols {
		return fmt.Errorf("%s: shapes %dx%d and %dx%d differ", op, a.rows, a.cols, b.rows, b.cols)
	}
	return nil
}

// MatMul is the matrix product a b.
func (gr *Graph) MatMul(a, b *Node) *Node {
	if !gr.ok(a, b) {
		return &Node{g: gr}
	}
	if a.IsScalar() || b.IsScalar() || a.cols != b.rows {
		return gr.fail("matmul", fmt.Errorf("shapes %dx%d and %dx%d do not chain", a.rows, a.cols, b.rows, b.cols))
	}
	n, err := G.Mul(a.n, b.n)
	return gr.wrap("matmul", n, err, a.rows, b.cols)
}

// AddRow adds the 1 x cols row r to every row of x.
func (gr *Graph) AddRow(x, r *Node) *Node { return gr.broadcast("addrow", x, r, 0, G.BroadcastAdd) }

// MulRow multiplies every row of x element-wise by the 1 x cols row r.
func (gr *Graph) MulRow(x, r *Node) *Node {
	return gr.broadcast("mulrow", x, r, 0, G.BroadcastHadamardProd)
}

// broadcast applies op to x and v, a 1 x cols row (axis 0) or a rows x 1
// column (axis 1) repeated along that axis to x's shape.
func (gr *Graph) broadcast(name string, x, v *Node, axis byte, op func(a, b *G.Node, l, r []byte) (*G.Node, error)) *Node {
	if !gr.ok(x, v) {
		return &Node{g: gr}
	}
	if axis == 0 && (v.rows != 1 || v.cols != x.cols) || axis == 1 && (v.cols != 1 || v.rows != x.rows) {
		what := map[byte]string{0: "row", 1: "column"}[axis]
		return gr.fail(name, fmt.Errorf("%s %dx%d does not fit %dx%d", what, v.rows, v.cols, x.rows, x.cols))
	}
	n, err := op(x.n, v.n, nil, []byte{axis})
	return gr.wrap(name, n, err, x.rows, x.cols)
}

func (gr *Graph) binary(op string, a, b *Node, f func(a, b *G.Node) (*G.Node, error)) *Node {
	if !gr.ok(a, b) {
		return &Node{g: gr}
	}
	if a.IsScalar() && b.IsScalar() && !isConst(a) && !isConst(b) {
		switch op {
		case "add":
			return gr.scalarArith(op, '+', 0, a, b)
		case "sub":
			return gr.scalarArith(op, '-', 0, a, b)
		case "mul":
			return gr.scalarArith(op, '*', 0, a, b)
		}
	}
	if a.IsScalar() != b.IsScalar() {
		// scalar with matrix: gorgonia broadcasts scalars itself.
		n, err := f(a.n, b.n)
		r, c := a.rows, a.cols
		if a.IsScalar() {
			r, c = b.rows, b.cols
		}
		return gr.wrap(op, n, err, r, c)
	}
	if err := sameShape(op, a, b); err != nil {
		return gr.fail(op, err)
	}
	n, err := f(a.n, b.n)
	return gr.wrap(op, n, err, a.rows, a.cols)
}

// Add is a + b element-wise (either may be a scalar).
func (gr *Graph) Add(a, b *Node) *Node { return gr.binary("add", a, b, G.Add) }

// Sub is a - b element-wise (either may be a scalar).
func (gr *Graph) Sub(a, b *Node) *Node { return gr.binary("sub", a, b, G.Sub) }

// Mul is a * b element-wise (either may be a scalar).
func (gr *Graph) Mul(a, b *Node) *Node {
	if a != nil && b != nil && (a.IsScalar() || b.IsScalar()) {
		return gr.binary("mul", a, b, G.Mul)
	}
	return gr.binary("mul", a, b, G.HadamardProd)
}

// Div is a / b element-wise (either may be a scalar).
func (gr *Graph) Div(a, b *Node) *Node { return gr.binary("div", a, b, G.HadamardDiv) }

// Scale is c * x.
func (gr *Graph) Scale(x *Node, c float64) *Node {
	if x != nil && x.IsScalar() && x.n != nil && !isConst(x) {
		return gr.scalarArith("scale", 's', c, x)
	}
	return gr.Mul(gr.Const(c), x)
}

// isConst reports whether x is a constant node (gorgonia's own operations
// handle those).
func isConst(x *Node) bool { return x.n != nil && x.n.Op() != nil && x.n.Op().Arity() == 0 }

// Shift is x + c.
func (gr *Graph) Shift(x *Node, c float64) *Node { return gr.Add(x, gr.Const(c)) }

func (gr *Graph) unary(op string, x *Node, f func(*G.Node) (*G.Node, error)) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	n, err := f(x.n)
	return gr.wrap(op, n, err, x.rows, x.cols)
}

// Neg is -x.
//
// On a scalar (a loss) it is a scale by -1, bitwise the same, which runs
// without allocating where gorgonia's negation of a scalar allocates.
func (gr *Graph) Neg(x *Node) *Node {
	if x != nil && x.IsScalar() && x.n != nil && !isConst(x) {
		return gr.scalarArith("scale", 's', -1, x)
	}
	return gr.unary("neg", x, G.Neg)
}

// Exp is exp(x).
func (gr *Graph) Exp(x *Node) *Node { return gr.unary("exp", x, G.Exp) }

// Log is the natural logarithm.
func (gr *Graph) Log(x *Node) *Node { return gr.unary("log", x, G.Log) }

// Log1p is log(1+x).
func (gr *Graph) Log1p(x *Node) *Node { return gr.unary("log1p", x, G.Log1p) }

// Square is x*x.
func (gr *Graph) Square(x *Node) *Node { return gr.unary("square", x, G.Square) }

// Sqrt is the square root.
func (gr *Graph) Sqrt(x *Node) *Node { return gr.unary("sqrt", x, G.Sqrt) }

// Abs is |x|.
func (gr *Graph) Abs(x *Node) *Node { return gr.unary("abs", x, G.Abs) }

// Tanh is the hyperbolic tangent, one fused operation for matrices.
func (gr *Graph) Tanh(x *Node) *Node {
	if x != nil && x.IsScalar() {
		return gr.unary("tanh", x, G.Tanh)
	}
	return gr.squash(x, squashTanh)
}

// Sigmoid is 1/(1+exp(-x)), one fused operation for matrices.
func (gr *Graph) Sigmoid(x *Node) *Node {
	if x != nil && x.IsScalar() {
		return gr.unary("sigmoid", x, G.Sigmoid)
	}
	return gr.squash(x, squashSigmoid)
}

// Softplus is log(1+exp(x)), stable for large |x|, one fused operation
// for matrices.
func (gr *Graph) Softplus(x *Node) *Node {
	if x != nil && x.IsScalar() {
		return gr.unary("softplus", x, G.Softplus)
	}
	return gr.squash(x, squashSoftplus)
}

// ReLU is max(0, x), one fused operation (gorgonia's Rectify is a
// comparison and a product).
func (gr *Graph) ReLU(x *Node) *Node { return gr.LeakyReLU(x, 0) }

// LeakyReLU is x for x >= 0 and slope*x otherwise, one fused operation
// whose gradient is 1 for x >= 0 and slope elsewhere.
func (gr *Graph) LeakyReLU(x *Node, slope float64) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	if x.IsScalar() {
		return gr.fail("leaky_relu", errors.New("scalar operand"))
	}
	n, err := G.ApplyOp(newLeaky(slope), x.n)
	return gr.wrap("leaky_relu", n, err, x.rows, x.cols)
}

// Affine is x W + b for x (rows x in), W (in x out) and the row b
// (1 x out), one fused operation: the bias is added row by row, not
// broadcast into a copy.
func (gr *Graph) Affine(x, w, b *Node) *Node {
	if !gr.ok(x, w, b) {
		return &Node{g: gr}
	}
	if x.cols != w.rows || b.rows != 1 || b.cols != w.cols {
		return gr.fail("affine", fmt.Errorf("shapes %dx%d, %dx%d, %dx%d do not chain", x.rows, x.cols, w.rows, w.cols, b.rows, b.cols))
	}
	n, err := G.ApplyOp(newAffine(), x.n, w.n, b.n)
	return gr.wrap("affine", n, err, x.rows, w.cols)
}

// AffineAct is Activate(Affine(x, w, b), a, slope), with ReLU and leaky
// ReLU (slope >= 0) fused into the affine operation: they are applied to
// each block of the product as it is finished, and their gradient is
// taken from the output.
func (gr *Graph) AffineAct(x, w, b *Node, a layers.Activation, slope float64) *Node {
	if a == layers.ReLU {
		a, slope = layers.LeakyReLU, 0
	}
	if a != layers.LeakyReLU || !(slope >= 0) {
		return gr.Activate(gr.Affine(x, w, b), a, slope)
	}
	if !gr.ok(x, w, b) {
		return &Node{g: gr}
	}
	if x.cols != w.rows || b.rows != 1 || b.cols != w.cols {
		return gr.fail("affine", fmt.Errorf("shapes %dx%d, %dx%d, %dx%d do not chain", x.rows, x.cols, w.rows, w.cols, b.rows, b.cols))
	}
	n, err := G.ApplyOp(newAffineLeaky(slope), x.n, w.n, b.n)
	return gr.wrap("affine_leaky_relu", n, err, x.rows, w.cols)
}

// ELU is x for x > 0 and exp(x)-1 otherwise, written as
// relu(x) - relu(1-exp(x)).
func (gr *Graph) ELU(x *Node) *Node {
	one := gr.Const(1)
	return gr.Sub(gr.ReLU(x), gr.ReLU(gr.Sub(one, gr.Exp(x))))
}

// Activate applies a layers activation.
func (gr *Graph) Activate(x *Node, a layers.Activation, slope float64) *Node {
	switch a {
	case layers.Identity:
		return x
	case layers.ReLU:
		return gr.ReLU(x)
	case layers.LeakyReLU:
		return gr.LeakyReLU(x, slope)
	case layers.ELU:
		return gr.ELU(x)
	case layers.Tanh:
		return gr.Tanh(x)
	case layers.Sigmoid:
		return gr.Sigmoid(x)
	case layers.Softplus:
		return gr.Softplus(x)
	}
	return gr.fail("activate", fmt.Errorf("unknown activation %v", a))
}

// Sum adds every element into a scalar.
func (gr *Graph) Sum(x *Node) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	if x.IsScalar() {
		return x
	}
	n, err := G.ApplyOp(sumAllOp{fused("SumAll", "ta", reduction)}, x.n)
	return gr.wrap("sum", n, err, 0, 0)
}

// Mean averages every element into a scalar.
func (gr *Graph) Mean(x *Node) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	if x.IsScalar() {
		return x
	}
	return gr.Scale(gr.Sum(x), 1/float64(x.rows*x.cols))
}

// SumCols adds across columns, giving a rows x 1 column.
func (gr *Graph) SumCols(x *Node) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	n, err := G.Sum(x.n, 1)
	if err != nil {
		return gr.fail("sumcols", err)
	}
	n, err = G.Reshape(n, tensor.Shape{x.rows, 1})
	return gr.wrap("sumcols", n, err, x.rows, 1)
}

// SumRows adds down rows, giving a 1 x cols row.
func (gr *Graph) SumRows(x *Node) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	n, err := G.Sum(x.n, 0)
	if err != nil {
		return gr.fail("sumrows", err)
	}
	n, err = G.Reshape(n, tensor.Shape{1, x.cols})
	return gr.wrap("sumrows", n, err, 1, x.cols)
}

// Dense applies an affine layer and its activation. mask, when not nil, is
// an input of the layer's output shape holding dropout multipliers.
func (gr *Graph) Dense(d *layers.Dense, x, mask *Node) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	if x.cols != d.In {
		return gr.fail("dense", fmt.Errorf("layer %q takes %d inputs, got %d", d.W.Name(), d.In, x.cols))
	}
	h := gr.AffineAct(x, gr.Param(d.W), gr.Param(d.B), d.Act, d.Slope)
	if mask != nil {
		h = gr.Mul(h, mask)
	}
	return h
}

// MLP applies every layer of m in turn. Layer i gets a dropout-mask input
// (rows x its width) when dropout[i] is not nil, which the caller fills
// each step; dropout may be nil (no masks: inference and evaluation).
func (gr *Graph) MLP(m *layers.MLP, x *Node, dropout []*Input) *Node {
	h := x
	for _, c := range m.Front {
		h = gr.ConvLayer(c, h, nil)
	}
	for i, d := range m.Layers {
		var mask *Node
		if i < len(dropout) && dropout[i] != nil {
			mask = gr.Input(dropout[i], x.rows, d.Out)
		}
		h = gr.Dense(d, h, mask)
	}
	for _, c := range m.Back {
		h = gr.ConvLayer(c, h, nil)
	}
	return h
}

// ConvLayer applies a convolution layer, or a transposed one, and its
// activation, one fused operation. scale, when not nil, is a 1 x 1 node the weights are
// multiplied by first (spectral normalisation).
func (gr *Graph) ConvLayer(c *layers.Conv, x, scale *Node) *Node {
	w := gr.Param(c.W)
	if scale != nil {
		w = gr.Mul(scale, w)
	}
	if !c.Act.Concrete() {
		return gr.fail("conv", fmt.Errorf("unknown activation %v", c.Act))
	}
	return gr.conv(x, w, gr.Param(c.B), c.Shape, c.Transposed, c.Act, c.Slope)
}

// DropoutInputs makes one mask input for each layer of m that has a
// dropout rate (nil entries for the others), or returns nil when none has.
func DropoutInputs(m *layers.MLP) []*Input {
	var ins []*Input
	for i, d := range m.Layers {
		if d.Dropout > 0 {
			if ins == nil {
				ins = make([]*Input, len(m.Layers))
			}
			ins[i] = NewInput(fmt.Sprintf("%s.%d.dropout", m.Name, i))
		}
	}
	return ins
}

// SubCol subtracts the rows x 1 column c from every column of x.
func (gr *Graph) SubCol(x, c *Node) *Node { return gr.broadcast("subcol", x, c, 1, G.BroadcastSub) }

// MulCol multiplies every column of x element-wise by the rows x 1 column c.
func (gr *Graph) MulCol(x, c *Node) *Node {
	return gr.broadcast("mulcol", x, c, 1, G.BroadcastHadamardProd)
}

// MaxCols is the largest value of each row, as a rows x 1 column.
func (gr *Graph) MaxCols(x *Node) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	n, err := G.Max(x.n, 1)
	if err != nil {
		return gr.fail("maxcols", err)
	}
	n, err = G.Reshape(n, tensor.Shape{x.rows, 1})
	return gr.wrap("maxcols", n, err, x.rows, 1)
}

// LogSumExpCols is log(sum_j exp(x_ij)) for each row i, as a rows x 1
// column, computed with the row maximum subtracted first.
func (gr *Graph) LogSumExpCols(x *Node) *Node {
	m := gr.MaxCols(x)
	return gr.Add(m, gr.Log(gr.SumCols(gr.Exp(gr.SubCol(x, m)))))
}

// LogSoftmax is x minus each row's log-sum-exp.
func (gr *Graph) LogSoftmax(x *Node) *Node { return gr.SubCol(x, gr.LogSumExpCols(x)) }

// Slice returns columns [from, to) of x.
func (gr *Graph) Slice(x *Node, from, to int) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	if from < 0 || to > x.cols || from >= to {
		return gr.fail("slice", fmt.Errorf("columns [%d,%d) of %dx%d", from, to, x.rows, x.cols))
	}
	n, err := G.ApplyOp(sliceColsOp{base(fmt.Sprintf("SliceCols[%d:%d]", from, to)), from, to}, x.n)
	return gr.wrap("slice", n, err, x.rows, to-from)
}

// Concat joins a and b side by side (same rows).
func (gr *Graph) Concat(a, b *Node) *Node {
	if !gr.ok(a, b) {
		return &Node{g: gr}
	}
	if a.rows != b.rows {
		return gr.fail("concat", fmt.Errorf("rows %d and %d differ", a.rows, b.rows))
	}
	n, err := G.Concat(1, a.n, b.n)
	return gr.wrap("concat", n, err, a.rows, a.cols+b.cols)
}

// Failf records a construction error (if none is recorded yet), for
// callers that validate shapes of their own.
func (gr *Graph) Failf(format string, args ...any) {
	if gr.err == nil {
		gr.err = fmt.Errorf(format, args...)
	}
}

// Reshape views x as rows x cols (same number of elements, row-major).
func (gr *Graph) Reshape(x *Node, rows, cols int) *Node {
	if !gr.ok(x) {
		return &Node{g: gr}
	}
	if rows*cols != x.rows*x.cols || rows <= 0 {
		return gr.fail("reshape", fmt.Errorf("%dx%d cannot become %dx%d", x.rows, x.cols, rows, cols))
	}
	n, err := G.Reshape(x.n, tensor.Shape{rows, cols})
	return gr.wrap("reshape", n, err, rows, cols)
}
