package engine

import (
	"errors"
	"fmt"
	"math"
	"sync/atomic"
	"unsafe"

	"github.com/quernlab/quern/internal/kernel/par"
	"github.com/quernlab/quern/internal/kernel/vec"
	"github.com/quernlab/quern/layers"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// ErrNonFinite is wrapped by errors for a NaN or infinite loss or gradient.
var ErrNonFinite = errors.New("non-finite value")

// ErrNoGradient is wrapped when a trainable parameter gets no gradient.
var ErrNoGradient = errors.New("parameter has no gradient")

// Program is a compiled graph for one batch size: its inputs, its loss and
// optional outputs, and the gradient of the loss with respect to every
// trainable (not frozen) parameter that the graph reads.
type Program struct {
	steps  []step
	vals   []G.Value // each node's value, in execution order
	loss   int
	outs   []*Node
	outIdx []int
	out32  [][]float32
	out64  [][]float64
	params []*layers.Param
	grads  []int
	direct []bool // gradient i is written into its parameter's buffer
	saved  [][]float64
	inputs map[*Input]*inputSlot
	prec   layers.Precision
	closed bool
	// kept for the test that runs the same graph on gorgonia's tape
	// machine
	graph     *G.ExprGraph
	lossNode  *G.Node
	gradNodes G.Nodes
}

// CompileOptions selects what Compile prepares.
type CompileOptions struct {
	// Grad asks for gradients of the loss with respect to trainable params.
	Grad bool
	// Outputs are extra nodes whose values are copied out after each run.
	Outputs []*Node
	// Wrt, when not nil, limits the gradient to these parameters (still
	// skipping frozen ones): a GAN's discriminator phase differentiates
	// only the discriminator although the generator is in the graph, and
	// the generator's weights stay untouched.
	Wrt []*layers.Param
}

// Compile finishes construction and returns a runnable program. loss must
// be a scalar. It releases the build lock whether or not it succeeds.
func (gr *Graph) Compile(loss *Node, opt CompileOptions) (*Program, error) {
	defer gr.Discard()
	if gr.compiled {
		return nil, errors.New("engine: graph compiled twice")
	}
	gr.compiled = true
	if !gr.ok(loss) {
		return nil, gr.err
	}
	for _, o := range opt.Outputs {
		if !gr.ok(o) {
			return nil, gr.err
		}
	}
	if !loss.IsScalar() {
		return nil, fmt.Errorf("engine: loss has shape %dx%d, want a scalar", loss.rows, loss.cols)
	}
	p := &Program{outs: opt.Outputs, inputs: gr.byInput, prec: gr.prec}
	var gradNodes G.Nodes
	if opt.Grad {
		var wrt G.Nodes
		allowed := map[*layers.Param]bool{}
		for _, q := range opt.Wrt {
			allowed[q] = true
		}
		for _, q := range gr.params {
			if !q.Frozen() && (opt.Wrt == nil || allowed[q]) {
				p.params = append(p.params, q)
				wrt = append(wrt, gr.pnodes[q])
			}
		}
		if len(wrt) > 0 {
			gs, err := G.Grad(loss.n, wrt...)
			if err != nil {
				return nil, fmt.Errorf("engine: gradient: %w", err)
			}
			gradNodes = gs
		}
	}
	roots := append([]*G.Node{loss.n}, gradNodes...)
	for _, o := range opt.Outputs {
		roots = append(roots, o.n)
	}
	steps, index, err := schedule(gr.g, roots)
	if err != nil {
		return nil, err
	}
	p.steps = steps
	p.graph, p.lossNode, p.gradNodes = gr.g, loss.n, gradNodes
	p.vals = make([]G.Value, len(steps))
	for i, s := range steps {
		if s.op == nil {
			p.vals[i] = s.node.Value()
		}
	}
	p.loss = index[loss.n]
	uses := map[int]int{}
	for i, gn := range gradNodes {
		j, ok := index[gn]
		if !ok || gn == nil {
			return nil, fmt.Errorf("engine: %q: %w", p.params[i].Name(), ErrNoGradient)
		}
		p.grads = append(p.grads, j)
		uses[j]++
	}
	// Gradients are written straight into the parameters' gradient
	// buffers where the operation allows it (no copy after the run),
	// unless one node is the gradient of two parameters.
	p.direct = make([]bool, len(p.grads))
	for i, j := range p.grads {
		if uses[j] == 1 {
			p.direct[i] = writeInto(p.steps, j, gradTensor(p.params[i]))
		}
	}
	for _, o := range opt.Outputs {
		p.outIdx = append(p.outIdx, index[o.n])
		n := max(1, o.rows*o.cols)
		if gr.prec == layers.Float64 {
			p.out64 = append(p.out64, make([]float64, n))
		} else {
			p.out32 = append(p.out32, make([]float32, n))
		}
	}
	return p, nil
}

// Params lists the trainable parameters that receive gradients, in the
// order they were first used.
func (p *Program) Params() []*layers.Param { return p.params }

// F32 returns the float32 storage of an input, to be filled before Run.
// It returns nil if the graph does not hold the input or the program is
// float64.
func (p *Program) F32(in *Input) []float32 {
	if s, ok := p.inputs[in]; ok {
		return s.f32
	}
	return nil
}

// F64 is F32 for float64 programs.
func (p *Program) F64(in *Input) []float64 {
	if s, ok := p.inputs[in]; ok {
		return s.f64
	}
	return nil
}

// Has reports whether the program's graph holds the input.
func (p *Program) Has(in *Input) bool { _, ok := p.inputs[in]; return ok }

// Precision is the program's precision.
func (p *Program) Precision() layers.Precision { return p.prec }

// Output32 returns the values of output i from the last run.
func (p *Program) Output32(i int) []float32 { return p.out32[i] }

// Output64 returns the values of output i from the last run.
func (p *Program) Output64(i int) []float64 { return p.out64[i] }

// RunOptions tunes one run.
type RunOptions struct {
	// Accumulate adds gradients into the parameters' buffers instead of
	// replacing them.
	Accumulate bool
}

// Run executes the program once: forward, backward when compiled with
// gradients, copy of gradients and outputs. It returns the loss. A
// NaN or infinite loss or gradient is an error wrapping ErrNonFinite; the
// parameters' gradients are then unspecified.
func (p *Program) Run(opt RunOptions) (float64, error) {
	if p.closed {
		return 0, errors.New("engine: run on a closed program")
	}
	if opt.Accumulate {
		p.saveDirect()
	}
	if err := execute(p.steps, p.vals); err != nil {
		return 0, fmt.Errorf("engine: run: %w", err)
	}
	loss, err := scalarOf(p.vals[p.loss])
	if err != nil {
		return 0, err
	}
	if math.IsNaN(loss) || math.IsInf(loss, 0) {
		return loss, fmt.Errorf("engine: loss is %v: %w", loss, ErrNonFinite)
	}
	for i, q := range p.params {
		gv := p.vals[p.grads[i]]
		if gv == nil {
			return loss, fmt.Errorf("engine: %q: %w", q.Name(), ErrNoGradient)
		}
		if p.direct[i] {
			if err := checkGrad(q); err != nil {
				return loss, err
			}
			if opt.Accumulate {
				p.addSaved(i, q)
			}
			continue
		}
		if err := copyGrad(q, gv, opt.Accumulate); err != nil {
			return loss, err
		}
	}
	for i, o := range p.outs {
		v := p.vals[p.outIdx[i]]
		if v == nil {
			return loss, fmt.Errorf("engine: output %d has no value", i)
		}
		if o.IsScalar() {
			x, err := scalarOf(v)
			if err != nil {
				return loss, err
			}
			if p.prec == layers.Float64 {
				p.out64[i][0] = x
			} else {
				p.out32[i][0] = float32(x)
			}
			continue
		}
		if err := copyOut(v, p.out32, p.out64, i); err != nil {
			return loss, err
		}
	}
	return loss, nil
}

func copyOut(v G.Value, out32 [][]float32, out64 [][]float64, i int) error {
	switch v.Dtype() {
	case tensor.Float32:
		d := f32(v)
		if i < len(out32) && len(d) == len(out32[i]) {
			copy(out32[i], d)
			return nil
		}
	case tensor.Float64:
		d := f64(v)
		if i < len(out64) && len(d) == len(out64[i]) {
			copy(out64[i], d)
			return nil
		}
	}
	return fmt.Errorf("engine: output %d has %d values of %T", i, v.Shape().TotalSize(), v.Data())
}

func scalarOf(v G.Value) (float64, error) {
	if v == nil {
		return 0, errors.New("engine: loss has no value")
	}
	switch s := v.(type) {
	case *G.F32:
		return float64(*s), nil
	case *G.F64:
		return float64(*s), nil
	}
	switch v.Dtype() {
	case tensor.Float32:
		d := f32(v)
		if len(d) == 1 {
			return float64(d[0]), nil
		}
	case tensor.Float64:
		d := f64(v)
		if len(d) == 1 {
			return d[0], nil
		}
	}
	return 0, fmt.Errorf("engine: loss value %T is not a scalar", v.Data())
}

// gradTensor wraps q's gradient buffer.
func gradTensor(q *layers.Param) *tensor.Dense {
	r, c := q.Shape()
	if q.Precision() == layers.Float64 {
		return tensor.New(tensor.WithShape(r, c), tensor.WithBacking(q.Grad64()))
	}
	return tensor.New(tensor.WithShape(r, c), tensor.WithBacking(q.Grad32()))
}

// saveDirect keeps the gradients that the run is about to overwrite in
// place, for Accumulate.
func (p *Program) saveDirect() {
	if p.saved == nil {
		p.saved = make([][]float64, len(p.params))
	}
	for i, q := range p.params {
		if !p.direct[i] {
			continue
		}
		n := q.Len()
		if cap(p.saved[i]) < n {
			p.saved[i] = make([]float64, n)
		}
		s := p.saved[i][:n]
		for j := range s {
			s[j] = q.GradAt(j)
		}
		p.saved[i] = s
	}
}

// addSaved adds the gradients kept by saveDirect back in.
func (p *Program) addSaved(i int, q *layers.Param) {
	if q.Precision() == layers.Float64 {
		for j, v := range p.saved[i] {
			q.Grad64()[j] += v
		}
		return
	}
	for j, v := range p.saved[i] {
		q.Grad32()[j] += float32(v)
	}
}

// checkGrad reports a NaN or infinite value in q's gradient.
func checkGrad(q *layers.Param) error {
	if q.Precision() == layers.Float64 {
		for i, v := range q.Grad64() {
			if v-v != 0 {
				return fmt.Errorf("engine: gradient of %q is %v at %d: %w", q.Name(), v, i, ErrNonFinite)
			}
		}
		return nil
	}
	g := q.Grad32()
	if !par.Worth(len(g)) {
		if i := firstNonFinite(g); i >= 0 {
			return fmt.Errorf("engine: gradient of %q is %v at %d: %w", q.Name(), g[i], i, ErrNonFinite)
		}
		return nil
	}
	var bad atomic.Bool
	par.For(len(g), func(lo, hi int) {
		if firstNonFinite(g[lo:hi]) >= 0 {
			bad.Store(true)
		}
	})
	if bad.Load() {
		i := firstNonFinite(g)
		return fmt.Errorf("engine: gradient of %q is %v at %d: %w", q.Name(), g[i], i, ErrNonFinite)
	}
	return nil
}

// firstNonFinite is the index of the first NaN or infinity in g, or -1.
func firstNonFinite(g []float32) int {
	if !anyNonFinite(g) {
		return -1
	}
	for i, v := range g {
		if v-v != 0 {
			return i
		}
	}
	return -1
}

// anyNonFinite scans two values per 64-bit word for an all-ones
// exponent: (bits & exponent mask) + lowest exponent bit overflows into
// the sign bit exactly then, and the low half cannot carry into the high
// one. A first value off 8-byte alignment is checked alone.
func anyNonFinite(g []float32) bool {
	bad, done := vec.NonFinite(g)
	if bad {
		return true
	}
	g = g[done:]
	if len(g) == 0 {
		return false
	}
	if uintptr(unsafe.Pointer(&g[0]))%8 != 0 {
		if g[0]-g[0] != 0 {
			return true
		}
		g = g[1:]
	}
	if len(g)%2 == 1 {
		if v := g[len(g)-1]; v-v != 0 {
			return true
		}
		g = g[:len(g)-1]
	}
	if len(g) == 0 {
		return false
	}
	const mask, one = 0x7f8000007f800000, 0x0080000000800000
	words := unsafe.Slice((*uint64)(unsafe.Pointer(&g[0])), len(g)/2)
	var a0, a1, a2, a3 uint64
	i := 0
	for ; i+4 <= len(words); i += 4 {
		a0 |= words[i]&mask + one
		a1 |= words[i+1]&mask + one
		a2 |= words[i+2]&mask + one
		a3 |= words[i+3]&mask + one
	}
	for ; i < len(words); i++ {
		a0 |= words[i]&mask + one
	}
	return (a0|a1|a2|a3)&0x8000000080000000 != 0
}

func copyGrad(q *layers.Param, gv G.Value, acc bool) error {
	switch gv.Dtype() {
	case tensor.Float32:
		return copyGradInto(q, q.Grad32(), f32(gv), acc)
	case tensor.Float64:
		return copyGradInto(q, q.Grad64(), f64(gv), acc)
	}
	return fmt.Errorf("engine: gradient of %q has type %v", q.Name(), gv.Dtype())
}

// copyGradInto copies (or with acc adds) the gradient d into q's buffer
// dst, refusing a NaN or infinity.
func copyGradInto[T float32 | float64](q *layers.Param, dst, d []T, acc bool) error {
	if len(d) != len(dst) {
		return fmt.Errorf("engine: gradient of %q has %d values, want %d", q.Name(), len(d), len(dst))
	}
	for i, v := range d {
		if v-v != 0 {
			return fmt.Errorf("engine: gradient of %q is %v at %d: %w", q.Name(), v, i, ErrNonFinite)
		}
	}
	if acc {
		for i, v := range d {
			dst[i] += v
		}
	} else {
		copy(dst, d)
	}
	return nil
}

// Close releases the machine. A closed program cannot run.
func (p *Program) Close() error {
	if p.closed {
		return nil
	}
	p.closed = true
	p.steps, p.vals, p.graph, p.lossNode, p.gradNodes = nil, nil, nil, nil, nil
	return nil
}
