package engine

import (
	"fmt"

	"github.com/quernlab/quern/layers"
	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// convOp is a 2-D convolution of image rows x (n x H*W*C, channels last)
// with filters w (OutC x KH*KW*C) and a bias b (1 x OutC), one fused
// operation: n x OH*OW*OutC, computed by layers.ConvForward (the
// graph-free path's own function, so the two agree bit for bit). The
// forward run keeps its patches for the gradient operations.
type convOp struct {
	opBase
	s    layers.ConvShape
	side *convSide
	// transposed: the transposed convolution of s (rows of s.Out() x
	// s.OutC to rows of s.H x s.W x s.C; layers.ConvTransposeForward)
	transposed bool
}

// convSide holds the forward's patches and the gradients, computed once
// per backward pass by whichever gradient operation runs first.
type convSide struct {
	cols32, dcols32, dx32, dw32, db32 []float32
	cols64, dcols64, dx64, dw64, db64 []float64
	n                                 int
	forward, backward                 int // runs counted, to tell a stale gradient
}

// convGradOp is the gradient of a convOp with respect to its input which
// (0: x, 1: w, 2: b); its inputs are x, w, the upstream gradient and the
// forward's output (which orders it after the forward run).
type convGradOp struct {
	opBase
	s          layers.ConvShape
	side       *convSide
	which      int
	transposed bool
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
	sd.n = n
	sd.forward++
	return out, nil
}

func (op convOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	var gs G.Nodes
	for which, name := range []string{"ConvGradX", "ConvGradW", "ConvGradB"} {
		g, err := G.ApplyOp(convGradOp{fused(name+"["+op.name+"]", "ttttt", firstInputShape), op.s, op.side, which, op.transposed}, in[0], in[1], grad, output)
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
	return tensor.Shape{1, convOp{s: op.s, transposed: op.transposed}.biasWidth()}, nil
}

func (op convGradOp) Do(in ...G.Value) (G.Value, error) {
	t, err := tensors(in, 4)
	if err != nil {
		return nil, err
	}
	sd := op.side
	if sd.forward == 0 {
		return nil, fmt.Errorf("engine: convolution gradient before its forward run")
	}
	n := sd.n
	s := op.s
	k := s.K()
	fwd := convOp{s: s, transposed: op.transposed}
	inW, bW := fwd.inWidth(), fwd.biasWidth()
	if sd.backward != sd.forward {
		// the first gradient operation of this pass computes all three
		switch {
		case t[0].Dtype() == tensor.Float32:
			sd.dx32, sd.dw32, sd.db32 = grow32(sd.dx32, n*inW), grow32(sd.dw32, s.OutC*k), grow32(sd.db32, bW)
			if op.transposed {
				sd.dcols32 = layers.ConvTransposeBackward(sd.dx32, sd.dw32, sd.db32, sd.dcols32, f32(t[2]), f32(t[0]), f32(t[1]), n, s)
			} else {
				sd.dcols32 = layers.ConvBackward(sd.dx32, sd.dw32, sd.db32, sd.dcols32, f32(t[2]), sd.cols32, f32(t[1]), n, s)
			}
		case t[0].Dtype() == tensor.Float64:
			sd.dx64, sd.dw64, sd.db64 = grow64(sd.dx64, n*inW), grow64(sd.dw64, s.OutC*k), grow64(sd.db64, bW)
			if op.transposed {
				sd.dcols64 = layers.ConvTransposeBackward(sd.dx64, sd.dw64, sd.db64, sd.dcols64, f64(t[2]), f64(t[0]), f64(t[1]), n, s)
			} else {
				sd.dcols64 = layers.ConvBackward(sd.dx64, sd.dw64, sd.db64, sd.dcols64, f64(t[2]), sd.cols64, f64(t[1]), n, s)
			}
		default:
			return nil, fmt.Errorf("engine: convolution gradient of %v", t[0].Dtype())
		}
		sd.backward = sd.forward
	}
	var rows, cols int
	switch op.which {
	case 0:
		rows, cols = n, inW
	case 1:
		rows, cols = s.OutC, k
	default:
		rows, cols = 1, bW
	}
	out := op.out(nil, t[0].Dtype(), rows, cols)
	switch t[0].Dtype() {
	case tensor.Float32:
		copy(f32(out), [][]float32{sd.dx32, sd.dw32, sd.db32}[op.which])
	case tensor.Float64:
		copy(f64(out), [][]float64{sd.dx64, sd.dw64, sd.db64}[op.which])
	}
	return out, nil
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
	op := convOp{fused(name, "tttt", firstInputShape), s, &convSide{}, false}
	n, err := G.ApplyOp(op, x.n, w.n, b.n)
	return gr.wrap("conv2d", n, err, x.rows, s.OutWidth())
}

// ConvTranspose2D is the transposed convolution described by s (see
// layers.TransposedShape) of rows x (n x OH*OW*Cin, with (OH, OW) =
// s.Out() and Cin = s.OutC) with weights w (Cin x KH*KW*Cout) and bias b
// (1 x Cout, Cout = s.C), one fused operation with its gradients:
// n x s.H*s.W*s.C.
func (gr *Graph) ConvTranspose2D(x, w, b *Node, s layers.ConvShape) *Node {
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
	op := convOp{fused(name, "tttt", firstInputShape), s, &convSide{}, true}
	n, err := G.ApplyOp(op, x.n, w.n, b.n)
	return gr.wrap("conv_transpose2d", n, err, x.rows, s.InWidth())
}
