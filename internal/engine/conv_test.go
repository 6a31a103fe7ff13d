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
