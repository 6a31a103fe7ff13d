package engine_test

import (
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/gradcheck"
	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
)

// checkConv holds a fused convolution (or its transpose) of geometry s
// over n rows to finite differences of sum(out * g) for the input, the
// filters and the bias (1e-6 relative), and its float32 forward to the
// graph-free function, bit for bit.
func checkConv(t *testing.T, s layers.ConvShape, n int, transposed bool, seed uint64) {
	rng := rand.New(rand.NewPCG(seed, 2))
	param := func(name string, rows, cols int, p layers.Precision) *layers.Param {
		v := layers.NewParam(name, rows, cols, p)
		for i := 0; i < rows*cols; i++ {
			x := rng.NormFloat64()
			if p == layers.Float64 {
				v.F64()[i] = x
			} else {
				v.F32()[i] = float32(x)
			}
		}
		return v
	}
	in, out, bias := s.InWidth(), s.OutWidth(), s.OutC
	graph := (*engine.Graph).Conv2D
	if transposed {
		in, out, bias = s.OutWidth(), s.InWidth(), s.C
		graph = (*engine.Graph).ConvTranspose2D
	}
	forward := func(x, w, b []float64) []float64 {
		if transposed {
			o, _ := layers.ConvTransposeForward(nil, nil, x, w, b, n, s)
			return o
		}
		o, _ := layers.ConvForward(nil, nil, x, w, b, n, s)
		return o
	}
	x := param("x", n, in, layers.Float64)
	w := param("w", s.OutC, s.K(), layers.Float64)
	b := param("b", 1, bias, layers.Float64)
	g := param("g", n, out, layers.Float64)
	build := func(gr *engine.Graph) *engine.Node {
		return gr.Sum(gr.Mul(graph(gr, gr.Param(x), gr.Param(w), gr.Param(b), s), gr.Param(g)))
	}
	ref := func() float64 {
		var sum float64
		for i, v := range forward(x.F64(), w.F64(), b.F64()) {
			sum += v * g.F64()[i]
		}
		return sum
	}
	res, err := gradcheck.Check([]*layers.Param{x, w, b}, build, ref, 1e-5)
	require.NoError(t, err)
	require.Less(t, res.MaxRelErr, 1e-6, res.String())

	x32 := param("x32", n, in, layers.Float32)
	w32 := param("w32", s.OutC, s.K(), layers.Float32)
	b32 := param("b32", 1, bias, layers.Float32)
	gr := engine.NewGraph(layers.Float32)
	conv := graph(gr, gr.Param(x32), gr.Param(w32), gr.Param(b32), s)
	prog, err := gr.Compile(gr.Sum(conv), engine.CompileOptions{Outputs: []*engine.Node{conv}})
	require.NoError(t, err)
	defer prog.Close()
	_, err = prog.Run(engine.RunOptions{})
	require.NoError(t, err)
	var want []float32
	if transposed {
		want, _ = layers.ConvTransposeForward(nil, nil, x32.F32(), w32.F32(), b32.F32(), n, s)
	} else {
		want, _ = layers.ConvForward(nil, nil, x32.F32(), w32.F32(), b32.F32(), n, s)
	}
	require.Equal(t, want, prog.Output32(0))
}

// The fused convolution's gradients with respect to the input, the
// filters and the bias agree with finite differences, for a stride-2,
// padded, two-channel, 3x2-kernel geometry; shapes that do not fit are
// construction errors naming them.
func TestConv2DGradients(t *testing.T) {
	s := layers.ConvShape{H: 5, W: 4, C: 2, OutC: 3, KH: 3, KW: 2, Stride: 2, Pad: 1}
	checkConv(t, s, 2, false, 1)
	bad := engine.NewGraph(layers.Float64)
	p := func(name string, r, c int) *engine.Node {
		return bad.Param(layers.NewParam(name, r, c, layers.Float64))
	}
	bad.Conv2D(p("x", 2, 27), p("w", 3, s.K()), p("b", 1, 3), s)
	require.ErrorContains(t, bad.Err(), "rows of 27 values for 5x4x2 images")
	bad.Discard()
}

// The fused transposed convolution's gradients agree with finite
// differences, stride 2 with output padding.
func TestConvTranspose2DGradients(t *testing.T) {
	s, err := layers.TransposedShape(3, 2, 2, 3, 3, 3, 2, 1, 1)
	require.NoError(t, err)
	checkConv(t, s, 2, true, 3)
}

// convNets builds an encoder with two convolutions (7x6 images of 2
// channels: odd and even sides) and a decoder with their transposes, of
// precision p.
func convNets(t *testing.T, p layers.Precision, hidden, out layers.Activation) (enc, dec *layers.MLP) {
	plan := layers.ConvPlan{Image: [3]int{7, 6, 2}, Channels: []int{3, 4}}
	rng := rand.New(rand.NewPCG(5, 6))
	enc, err := layers.NewMLP(layers.MLPConfig{Name: "encoder", Widths: []int{84, 5, 3}, Hidden: hidden, Precision: p, Conv: &plan}, rng)
	require.NoError(t, err)
	plan.Out = true
	dec, err = layers.NewMLP(layers.MLPConfig{Name: "decoder", Widths: []int{3, 5, 84}, Hidden: hidden, Output: out, Precision: p, Conv: &plan}, rng)
	require.NoError(t, err)
	// the encoder's feature maps: 7x6 -> 4x3 -> 2x2, 4 channels
	require.Len(t, enc.Front, 2)
	require.Equal(t, 16, enc.Layers[0].In)
	require.Equal(t, 84, enc.In())
	require.Equal(t, 84, dec.Out())
	require.Len(t, dec.Back, 2)
	require.True(t, dec.Back[0].Transposed)
	require.Equal(t, out, dec.Back[1].Act)
	return enc, dec
}

// A network with convolutions differentiates through them: an
// autoencoder's squared error against finite differences (1e-6 relative)
// for every parameter, and the float32 graph's forward pass equals the
// graph-free one bit for bit.
func TestConvNetworkGradients(t *testing.T) {
	// each activation fused into the convolutions, differentiated from
	// its output (ReLU's kink is left out: a finite difference across it
	// is no check)
	for _, c := range []struct{ hidden, out layers.Activation }{
		{layers.Tanh, layers.Sigmoid}, {layers.ELU, layers.Softplus}, {layers.LeakyReLU, layers.Identity},
	} {
		enc, dec := convNets(t, layers.Float64, c.hidden, c.out)
		const n = 3
		_, x64 := randRows(n, 84, 8)
		x := layers.NewParam("x", n, 84, layers.Float64)
		require.NoError(t, x.SetValues(x64))
		build := func(g *engine.Graph) *engine.Node {
			r := g.MLP(dec, g.MLP(enc, g.Param(x), nil), nil)
			return g.Sum(g.Square(g.Sub(r, g.Param(x))))
		}
		ps := append(append([]*layers.Param{x}, enc.Params()...), dec.Params()...)
		res, err := gradcheck.Check(ps, build, nil, 1e-3) // a loss near 300: a larger step keeps rounding small
		require.NoError(t, err)
		tol := 1e-6
		if c.hidden == layers.LeakyReLU {
			// some steps straddle the kink (4.4e-6 seen; a smaller step
			// trades it for rounding: 2.2e-5 at 1e-4)
			tol = 1e-5
		}
		require.Less(t, res.MaxRelErr, tol, "%v/%v: %s", c.hidden, c.out, res.String())
	}

	const n = 3
	// (not ELU: the graph writes a dense layer's ELU as relu(x) -
	// relu(1-exp(x)), which rounds differently from the graph-free
	// exp(x)-1)
	for _, act := range []layers.Activation{layers.ReLU, layers.LeakyReLU, layers.Tanh, layers.Sigmoid, layers.Softplus} {
		enc32, dec32 := convNets(t, layers.Float32, act, layers.Sigmoid)
		x32, _ := randRows(n, 84, 9)
		g := engine.NewGraph(layers.Float32)
		xin := handle("x")
		code := g.MLP(enc32, g.Input(xin, n, 84), nil)
		out := g.MLP(dec32, code, nil)
		p, err := g.Compile(g.Sum(out), engine.CompileOptions{Outputs: []*engine.Node{code, out}})
		require.NoError(t, err)
		copy(p.F32(xin), x32)
		_, err = p.Run(engine.RunOptions{})
		require.NoError(t, err)
		var ws layers.Workspace
		c, err := enc32.Forward32(x32, n, &ws)
		require.NoError(t, err)
		c = append([]float32(nil), c...)
		require.Equal(t, c, p.Output32(0), "code, %v", act)
		o, err := dec32.Forward32(c, n, &ws)
		require.NoError(t, err)
		require.Equal(t, o, p.Output32(1), "output, %v", act)
		p.Close()
	}
}
