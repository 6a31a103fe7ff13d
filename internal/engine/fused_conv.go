package engine

import (
	"fmt"

	"github.com/quernlab/quern/layers"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// convOp is a 2-D convolution of image rows x (n x H*W*C, channels last)
// with filters w (OutC x KH*KW*C) and a bias b (1 x OutC), then an
// activation, one fused operation: n x OH*OW*OutC, computed by
// layers.ConvForward and layers.ApplyActivation (the graph-free path's own
// functions, so the two agree bit for bit). The forward run keeps its
// patches for the gradient operations.
type convOp struct {
	opBase
	s     layers.ConvShape
	side  *convSide
	act   layers.Activation
	slope float64
	// transposed: the transposed convolution of s (rows of s.Out() x
	// s.OutC to rows of s.H x s.W x s.C; layers.ConvTransposeForward)
	transposed bool
}

// convSide holds the forward's patches and the gradients, each computed
// once per backward pass by whichever gradient operation first needs it:
// the gradient before the activation (gpre) and, for a transposed
// convolution, its patches; the filter and bias gradients; the input
// gradient, which a first layer fed with data never asks for.
type convSide struct {
	cols32, dcols32, gpre32, dx32, dw32, db32 []float32
	cols64, dcols64, gpre64, dx64, dw64, db64 []float64
	n                                         int
	// runs counted, to tell a stale result
	forward, prepared, filtered, inputted int
}

// convGradOp is the gradient of a convOp with respect to its input which
// (0: x, 1: w, 2: b); its inputs are x, w, the upstream gradient and the
// forward's output (which orders it after the forward run).
type convGradOp struct {
	opBase
	fwd   convOp
	which int
}

func (op convOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	x, err := shape2(in, 0)
	if err != nil {
		return nil, err
	}
	return tensor.Shape{x[0], op.outWidth()}, nil
}

// inWidth and outWidth are the operation's input and output row lengths.
func (op convOp) inWidth() int {
	if op.transposed {
		return op.s.OutWidth()
	}
	return op.s.InWidth()
}

func (op convOp) outWidth() int {
	if op.transposed {
		return op.s.InWidth()
	}
	return op.s.OutWidth()
}

// biasWidth is the number of output channels.
func (op convOp) biasWidth() int {
	if op.transposed {
		return op.s.C
	}
	return op.s.OutC
}

func (op convOp) Do(in ...G.Value) (G.Value, error) {
	t, err := tensors(in, 3)
	if err != nil {
		return nil, err
	}
	n, _ := dims(t[0])
	out := op.out(nil, t[0].Dtype(), n, op.outWidth())
	sd := op.side
	switch {
	case t[0].Dtype() == tensor.Float32 && op.transposed:
		_, sd.cols32 = layers.ConvTransposeForward(f32(out), sd.cols32, f32(t[0]), f32(t[1]), f32(t[2]), n, op.s)
	case t[0].Dtype() == tensor.Float64 && op.transposed:
		_, sd.cols64 = layers.ConvTransposeForward(f64(out), sd.cols64, f64(t[0]), f64(t[1]), f64(t[2]), n, op.s)
	case t[0].Dtype() == tensor.Float32:
		_, sd.cols32 = layers.ConvForward(f32(out), sd.cols32, f32(t[0]), f32(t[1]), f32(t[2]), n, op.s)
	case t[0].Dtype() == tensor.Float64:
		_, sd.cols64 = layers.ConvForward(f64(out), sd.cols64, f64(t[0]), f64(t[1]), f64(t[2]), n, op.s)
	default:
		return nil, fmt.Errorf("engine: convolution of %v", t[0].Dtype())
	}
	if t[0].Dtype() == tensor.Float32 {
		layers.ApplyActivation(op.act, f32(out), op.slope)
	} else {
		layers.ApplyActivation(op.act, f64(out), op.slope)
	}
	sd.n = n
	sd.forward++
	return out, nil
}

func (op convOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	var gs G.Nodes
	for which, name := range []string{"ConvGradX", "ConvGradW", "ConvGradB"} {
		g, err := G.ApplyOp(convGradOp{fused(name+"["+op.name+"]", "ttttt", firstInputShape), op, which}, in[0], in[1], grad, output)
		if err != nil {
			return nil, err
		}
		gs = append(gs, g)
	}
	return gs, nil
}

func (op convGradOp) InferShape(in ...G.DimSizer) (tensor.Shape, error) {
	switch op.which {
	case 0:
		return firstShape(in)
	case 1:
		s, err := shape2(in, 1)
		if err != nil {
			return nil, err
		}
		return s.Clone(), nil
	}
	return tensor.Shape{1, op.fwd.biasWidth()}, nil
}

func (op convGradOp) Do(in ...G.Value) (G.Value, error) {
	t, err := tensors(in, 4)
	if err != nil {
		return nil, err
	}
	sd := op.fwd.side
	if sd.forward == 0 {
		return nil, fmt.Errorf("engine: convolution gradient before its forward run")
	}
	var rows, cols int
	switch op.which {
	case 0:
		rows, cols = sd.n, op.fwd.inWidth()
	case 1:
		rows, cols = op.fwd.s.OutC, op.fwd.s.K()
	default:
		rows, cols = 1, op.fwd.biasWidth()
	}
	out := op.out(nil, t[0].Dtype(), rows, cols)
	switch t[0].Dtype() {
	case tensor.Float32:
		copy(f32(out), convGrads(op, sd, &convBufs[float32]{&sd.cols32, &sd.dcols32, &sd.gpre32, &sd.dx32, &sd.dw32, &sd.db32},
			f32(t[0]), f32(t[1]), f32(t[2]), f32(t[3])))
	case tensor.Float64:
		copy(f64(out), convGrads(op, sd, &convBufs[float64]{&sd.cols64, &sd.dcols64, &sd.gpre64, &sd.dx64, &sd.dw64, &sd.db64},
			f64(t[0]), f64(t[1]), f64(t[2]), f64(t[3])))
	default:
		return nil, fmt.Errorf("engine: convolution gradient of %v", t[0].Dtype())
	}
	return out, nil
}

// convBufs points at one precision's buffers of a convSide.
type convBufs[T float32 | float64] struct {
	cols, dcols, gpre, dx, dw, db *[]T
}

// convGrads computes what op asks for in this backward pass (and what
// that needs, once per pass) and returns it: x and w are the forward's
// inputs, g the gradient of its output, out the output.
func convGrads[T float32 | float64](op convGradOp, sd *convSide, b *convBufs[T], x, w, g, out []T) []T {
	f := op.fwd
	s, n := f.s, sd.n
	if sd.prepared != sd.forward {
		// the gradient before the activation; a transposed
		// convolution's patches of it
		gp := g
		if f.act != layers.Identity {
			*b.gpre = grow(*b.gpre, len(g))
			gp = *b.gpre
			copy(gp, g)
			layers.ActivationGrad(f.act, gp, out, f.slope)
		}
		if f.transposed {
			*b.cols = layers.Im2Col(*b.cols, gp, n, s)
		}
		sd.prepared = sd.forward
	}
	gp := *b.gpre
	if f.act == layers.Identity {
		gp = g
	}
	if op.which == 0 {
		if sd.inputted != sd.forward {
			*b.dx = grow(*b.dx, n*f.inWidth())
			if f.transposed {
				layers.ConvTransposeInputGrad(*b.dx, *b.cols, w, n, s)
			} else {
				*b.dcols = layers.ConvInputGrad(*b.dx, *b.dcols, gp, w, n, s)
			}
			sd.inputted = sd.forward
		}
		return *b.dx
	}
	if sd.filtered != sd.forward {
		*b.dw, *b.db = grow(*b.dw, s.OutC*s.K()), grow(*b.db, f.biasWidth())
		if f.transposed {
			layers.ConvTransposeFilterGrad(*b.dw, *b.db, *b.cols, gp, x, n, s)
		} else {
			layers.ConvFilterGrad(*b.dw, *b.db, gp, *b.cols, n, s)
		}
		sd.filtered = sd.forward
	}
	if op.which == 1 {
		return *b.dw
	}
	return *b.db
}

func grow[T float32 | float64](s []T, n int) []T {
	if cap(s) < n {
		return make([]T, n)
	}
	return s[:n]
}

func grow32(s []float32, n int) []float32 {
	if cap(s) < n {
		return make([]float32, n)
	}
	return s[:n]
}

func grow64(s []float64, n int) []float64 {
	if cap(s) < n {
		return make([]float64, n)
	}
	return s[:n]
}

// Conv2D is the 2-D convolution of image rows x (n x H*W*C, channels
// last) with filters w (OutC x KH*KW*C) and bias b (1 x OutC) of the
// geometry s, one fused operation with its gradients: n x OH*OW*OutC.
func (gr *Graph) Conv2D(x, w, b *Node, s layers.ConvShape) *Node {
	return gr.conv(x, w, b, s, false, layers.Identity, 0)
}

// ConvTranspose2D is the transposed convolution described by s (see
// layers.TransposedShape) of rows x (n x OH*OW*Cin, with (OH, OW) =
// s.Out() and Cin = s.OutC) with weights w (Cin x KH*KW*Cout) and bias b
// (1 x Cout, Cout = s.C), one fused operation with its gradients:
// n x s.H*s.W*s.C.
func (gr *Graph) ConvTranspose2D(x, w, b *Node, s layers.ConvShape) *Node {
	return gr.conv(x, w, b, s, true, layers.Identity, 0)
}

// conv is Conv2D or ConvTranspose2D followed by the activation act, in
// one operation.
func (gr *Graph) conv(x, w, b *Node, s layers.ConvShape, transposed bool, act layers.Activation, slope float64) *Node {
	if transposed {
		return gr.convTransposed(x, w, b, s, act, slope)
	}
	if !gr.ok(x, w, b) {
		return &Node{g: gr}
	}
	if err := s.Check(); err != nil {
		return gr.fail("conv2d", err)
	}
	switch {
	case x.cols != s.InWidth():
		return gr.fail("conv2d", fmt.Errorf("rows of %d values for %dx%dx%d images", x.cols, s.H, s.W, s.C))
	case w.rows != s.OutC || w.cols != s.K():
		return gr.fail("conv2d", fmt.Errorf("filters %dx%d, want %dx%d", w.rows, w.cols, s.OutC, s.K()))
	case b.rows != 1 || b.cols != s.OutC:
		return gr.fail("conv2d", fmt.Errorf("bias %dx%d, want 1x%d", b.rows, b.cols, s.OutC))
	}
	name := fmt.Sprintf("Conv2D[%dx%dx%d,%d,%dx%d,s%d,p%d]", s.H, s.W, s.C, s.OutC, s.KH, s.KW, s.Stride, s.Pad)
	if act != layers.Identity {
		name += "+" + act.String()
	}
	op := convOp{fused(name, "tttt", firstInputShape), s, &convSide{}, act, slope, false}
	n, err := G.ApplyOp(op, x.n, w.n, b.n)
	return gr.wrap("conv2d", n, err, x.rows, s.OutWidth())
}

func (gr *Graph) convTransposed(x, w, b *Node, s layers.ConvShape, act layers.Activation, slope float64) *Node {
	if !gr.ok(x, w, b) {
		return &Node{g: gr}
	}
	if err := s.Check(); err != nil {
		return gr.fail("conv_transpose2d", err)
	}
	oh, ow := s.Out()
	switch {
	case x.cols != s.OutWidth():
		return gr.fail("conv_transpose2d", fmt.Errorf("rows of %d values for %dx%dx%d inputs", x.cols, oh, ow, s.OutC))
	case w.rows != s.OutC || w.cols != s.K():
		return gr.fail("conv_transpose2d", fmt.Errorf("weights %dx%d, want %dx%d", w.rows, w.cols, s.OutC, s.K()))
	case b.rows != 1 || b.cols != s.C:
		return gr.fail("conv_transpose2d", fmt.Errorf("bias %dx%d, want 1x%d", b.rows, b.cols, s.C))
	}
	name := fmt.Sprintf("ConvTranspose2D[%dx%dx%d,%d,%dx%d,s%d,p%d]", s.H, s.W, s.C, s.OutC, s.KH, s.KW, s.Stride, s.Pad)
	if act != layers.Identity {
		name += "+" + act.String()
	}
	op := convOp{fused(name, "tttt", firstInputShape), s, &convSide{}, act, slope, true}
	n, err := G.ApplyOp(op, x.n, w.n, b.n)
	return gr.wrap("conv_transpose2d", n, err, x.rows, s.InWidth())
}
