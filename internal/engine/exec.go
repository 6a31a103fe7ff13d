package engine

import (
	"fmt"
	"strings"

	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// quern runs compiled graphs with its own executor instead of gorgonia's
// tape machine. The tape machine locks the calling goroutine to its OS
// thread and runs the tape on a second goroutine for every RunAll, which
// costs two thread hand-offs per run (a third of a small model's step was
// spent in futex wake-ups), forgets every register at Reset so that its
// own operations allocate fresh tensors each run, and needs Read
// instructions to copy outputs before later in-place operations clobber
// them. The executor instead walks the graph once in topological order:
// every node keeps its own value, operations are called through their
// safe Do (never in place), and the operations whose preallocated form
// is known to overwrite its destination write into a buffer of the
// node's own that lives as long as the program.

// step is one node of the program in execution order.
type step struct {
	node *G.Node
	op   G.Op              // nil for inputs, parameters and bound values
	pd   G.UsePreallocDoer // set when the node writes into buf
	buf  G.Value
	args []int     // positions of the node's children in Program.vals
	in   []G.Value // scratch for the children's values
	fast fastOp    // see fastKind
}

// overwritingPrealloc lists gorgonia operations whose UsePreallocDo
// overwrites the whole destination (element-wise arithmetic, matrix
// products, repeat), checked against gorgonia v0.9.18's source. Others
// are called through Do: sliceIncrOp's UsePreallocDo, for one, adds into
// its destination instead of overwriting it.
var overwritingPrealloc = map[string]bool{
	"gorgonia.elemBinOp":   true,
	"gorgonia.linAlgBinOp": true,
	"gorgonia.repeatOp":    true,
	"*gorgonia.repeatOp":   true,
}

// schedule orders the nodes that the roots depend on so that children
// come before their parents, and prepares each node's step. Nodes that no
// root needs are left out: gorgonia's symbolic differentiation also
// builds gradients for inputs that nothing asks for (the target of a
// loss, for one), which the tape machine would compute every run.
func schedule(g *G.ExprGraph, roots []*G.Node) ([]step, map[*G.Node]int, error) {
	sorted, err := G.Sort(g)
	if err != nil {
		return nil, nil, fmt.Errorf("engine: sort: %w", err)
	}
	needed := map[*G.Node]bool{}
	stack := append([]*G.Node(nil), roots...)
	for len(stack) > 0 {
		n := stack[len(stack)-1]
		stack = stack[:len(stack)-1]
		if n == nil || needed[n] {
			continue
		}
		needed[n] = true
		kids := g.From(n.ID())
		for kids.Next() {
			if c, ok := kids.Node().(*G.Node); ok && !needed[c] {
				stack = append(stack, c)
			}
		}
	}
	// Sort puts the roots first; execution needs them last.
	var steps []step
	index := make(map[*G.Node]int, len(needed))
	for i := len(sorted) - 1; i >= 0; i-- {
		n := sorted[i]
		if !needed[n] {
			continue
		}
		index[n] = len(steps)
		steps = append(steps, step{node: n})
	}
	for i := range steps {
		s := &steps[i]
		n := s.node
		op := n.Op()
		if op == nil {
			if n.Value() == nil {
				return nil, nil, fmt.Errorf("engine: node %v has neither an operation nor a value", n)
			}
			continue
		}
		s.op = op
		kids := g.From(n.ID())
		for kids.Next() {
			c, ok := kids.Node().(*G.Node)
			if !ok {
				return nil, nil, fmt.Errorf("engine: node %v has a child of type %T", n, kids.Node())
			}
			j, ok := index[c]
			if !ok || j >= i {
				return nil, nil, fmt.Errorf("engine: node %v is scheduled before its child %v", n, c)
			}
			s.args = append(s.args, j)
		}
		s.in = make([]G.Value, len(s.args))
		if pd, ok := op.(G.UsePreallocDoer); ok && overwritingPrealloc[fmt.Sprintf("%T", op)] && !n.IsScalar() {
			dt := n.Dtype()
			shp := n.Shape()
			if dt == tensor.Float32 || dt == tensor.Float64 {
				s.pd = pd
				s.buf = tensor.New(tensor.WithShape(shp...), tensor.Of(dt))
			}
		}
		var kidNodes []*G.Node
		for _, j := range s.args {
			kidNodes = append(kidNodes, steps[j].node)
		}
		if s.fast = fastKind(op, n, kidNodes); s.fast.kind != 0 && s.buf == nil {
			s.buf = tensor.New(tensor.WithShape(n.Shape()...), tensor.Of(n.Dtype()))
		}
	}
	return steps, index, nil
}

// fastOp is a gorgonia element-wise operation that the executor computes
// itself into the node's buffer: +, - or the product of two float
// matrices of the node's shape, or of one such matrix and a scalar (on
// either side), or the negation of a matrix. gorgonia's own preallocated
// path allocates its options on every call; the arithmetic is the same,
// element by element.
type fastOp struct {
	kind   byte // '+', '-', '*' or 'n' (negation); 0 for none
	scalar int  // which operand is a scalar, or -1
}

func fastKind(op G.Op, n *G.Node, kids []*G.Node) fastOp {
	none := fastOp{scalar: -1}
	if n.IsScalar() || (n.Dtype() != tensor.Float32 && n.Dtype() != tensor.Float64) {
		return none
	}
	scalar := -1
	for i, k := range kids {
		switch {
		case k.IsScalar() && len(kids) == 2 && scalar < 0 && k.Dtype() == n.Dtype():
			scalar = i
		case !k.Shape().Eq(n.Shape()):
			return none
		}
	}
	name, typ := op.String(), fmt.Sprintf("%T", op)
	switch {
	case typ == "gorgonia.elemBinOp" && len(kids) == 2:
		if len(name) > 2 && name[1] == ' ' && (name[0] == '+' || name[0] == '-') {
			return fastOp{name[0], scalar}
		}
		if strings.HasPrefix(name, "⊙ ") {
			return fastOp{'*', scalar}
		}
	case typ == "gorgonia.elemUnaryOp" && len(kids) == 1 && name == "neg" && scalar < 0:
		return fastOp{'n', -1}
	}
	return none
}

// fastDo computes a fastOp into out; it reports false when the values are
// not what fastKind expected.
func fastDo(f fastOp, out G.Value, in []G.Value) bool {
	if o := f32(out); o != nil {
		return fastLoop(f, o, in, f32, scalarOf32)
	}
	if o := f64(out); o != nil {
		return fastLoop(f, o, in, f64, scalarOf64)
	}
	return false
}

func scalarOf32(v G.Value) (float32, bool) {
	s, ok := v.(*G.F32)
	if !ok {
		return 0, false
	}
	return float32(*s), true
}

func scalarOf64(v G.Value) (float64, bool) {
	s, ok := v.(*G.F64)
	if !ok {
		return 0, false
	}
	return float64(*s), true
}

func fastLoop[T float32 | float64](f fastOp, o []T, in []G.Value, get func(G.Value) []T, scalar func(G.Value) (T, bool)) bool {
	if f.kind == 'n' {
		a := get(in[0])
		if len(a) != len(o) {
			return false
		}
		for i, v := range a {
			o[i] = -v
		}
		return true
	}
	if f.scalar >= 0 {
		c, ok := scalar(in[f.scalar])
		m := get(in[1-f.scalar])
		if !ok || len(m) != len(o) {
			return false
		}
		switch {
		case f.kind == '+':
			for i, v := range m {
				o[i] = v + c
			}
		case f.kind == '*':
			for i, v := range m {
				o[i] = c * v
			}
		case f.scalar == 1: // m - c
			for i, v := range m {
				o[i] = v - c
			}
		default: // c - m
			for i, v := range m {
				o[i] = c - v
			}
		}
		return true
	}
	a, b := get(in[0]), get(in[1])
	if len(a) != len(o) || len(b) != len(o) {
		return false
	}
	switch f.kind {
	case '+':
		for i, v := range a {
			o[i] = v + b[i]
		}
	case '-':
		for i, v := range a {
			o[i] = v - b[i]
		}
	default:
		for i, v := range a {
			o[i] = v * b[i]
		}
	}
	return true
}

// ownsBuffer marks quern's fused operations, whose UsePreallocDo writes
// the whole of a preallocated destination of the right type and shape.
type ownsBuffer interface{ quernOp() }

func (opBase) quernOp() {}

// writeInto makes step i write its result straight into t (a parameter's
// gradient buffer of the node's shape) when the operation is known to
// overwrite its destination; it reports whether it did.
func writeInto(steps []step, i int, t *tensor.Dense) bool {
	s := &steps[i]
	if s.op == nil || !s.node.Shape().Eq(t.Shape()) || s.node.Dtype() != t.Dtype() {
		return false
	}
	pd, ok := s.op.(G.UsePreallocDoer)
	if !ok {
		return false
	}
	if _, ours := s.op.(ownsBuffer); !ours && !overwritingPrealloc[fmt.Sprintf("%T", s.op)] {
		return false
	}
	s.pd, s.buf = pd, t
	return true
}

// execute runs every step once, leaving each node's value in vals.
func execute(steps []step, vals []G.Value) error {
	for i := range steps {
		s := &steps[i]
		if s.op == nil {
			continue
		}
		for j, a := range s.args {
			s.in[j] = vals[a]
		}
		if s.fast.kind != 0 && fastDo(s.fast, s.buf, s.in) {
			vals[i] = s.buf
			continue
		}
		var v G.Value
		var err error
		if s.pd != nil {
			v, err = s.pd.UsePreallocDo(s.buf, s.in...)
		} else {
			v, err = s.op.Do(s.in...)
		}
		if err != nil {
			return fmt.Errorf("engine: %v: %w", s.op, err)
		}
		vals[i] = v
	}
	return nil
}

// f32 returns the float32 storage of a dense value without the reflection
// and allocation of Data, or nil for any other value.
func f32(v G.Value) []float32 {
	if d, ok := v.(*tensor.Dense); ok && d.Dtype() == tensor.Float32 {
		return d.Float32s()
	}
	return nil
}

// f64 is f32 for float64 values.
func f64(v G.Value) []float64 {
	if d, ok := v.(*tensor.Dense); ok && d.Dtype() == tensor.Float64 {
		return d.Float64s()
	}
	return nil
}
