package engine_test

import (
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/gradcheck"
	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
)

// The fused convolution's gradients with respect to the input, the
// filters and the bias agree with finite differences of sum(out * g) to
// 1e-6 (relative), for a stride-2, padded, several-channel geometry; its
// float32 forward is bit for bit the graph-free layers.ConvForward.
func TestConv2DGradients(t *testing.T) {
	s := layers.ConvShape{H: 5, W: 4, C: 2, OutC: 3, KH: 3, KW: 2, Stride: 2, Pad: 1}
	n := 2
	rng := rand.New(rand.NewPCG(1, 2))
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
	x := param("x", n, s.InWidth(), layers.Float64)
	w := param("w", s.OutC, s.K(), layers.Float64)
	b := param("b", 1, s.OutC, layers.Float64)
	g := param("g", n, s.OutWidth(), layers.Float64)
	build := func(gr *engine.Graph) *engine.Node {
		return gr.Sum(gr.Mul(gr.Conv2D(gr.Param(x), gr.Param(w), gr.Param(b), s), gr.Param(g)))
	}
	ref := func() float64 {
		out, _ := layers.ConvForward(nil, nil, x.F64(), w.F64(), b.F64(), n, s)
		var sum float64
		for i, v := range out {
			sum += v * g.F64()[i]
		}
		return sum
	}
	res, err := gradcheck.Check([]*layers.Param{x, w, b}, build, ref, 1e-5)
	require.NoError(t, err)
	require.Less(t, res.MaxRelErr, 1e-6, res.String())

	x32 := param("x32", n, s.InWidth(), layers.Float32)
	w32 := param("w32", s.OutC, s.K(), layers.Float32)
	b32 := param("b32", 1, s.OutC, layers.Float32)
	gr := engine.NewGraph(layers.Float32)
	conv := gr.Conv2D(gr.Param(x32), gr.Param(w32), gr.Param(b32), s)
	prog, err := gr.Compile(gr.Sum(conv), engine.CompileOptions{Outputs: []*engine.Node{conv}})
	require.NoError(t, err)
	defer prog.Close()
	_, err = prog.Run(engine.RunOptions{})
	require.NoError(t, err)
	want, _ := layers.ConvForward(nil, nil, x32.F32(), w32.F32(), b32.F32(), n, s)
	require.Equal(t, want, prog.Output32(0))

	// shapes that do not fit are construction errors naming them
	bad := engine.NewGraph(layers.Float64)
	bad.Conv2D(bad.Param(g), bad.Param(w), bad.Param(b), s)
	require.ErrorContains(t, bad.Err(), "rows of 27 values for 5x4x2 images")
	bad.Discard()
}

// The fused transposed convolution's gradients agree with finite
// differences to 1e-6 (relative), stride 2 with output padding; its
// float32 forward is bit for bit layers.ConvTransposeForward.
func TestConvTranspose2DGradients(t *testing.T) {
	s, err := layers.TransposedShape(3, 2, 2, 3, 3, 3, 2, 1, 1)
	require.NoError(t, err)
	n := 2
	rng := rand.New(rand.NewPCG(3, 4))
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
	x := param("x", n, s.OutWidth(), layers.Float64)
	w := param("w", s.OutC, s.K(), layers.Float64)
	b := param("b", 1, s.C, layers.Float64)
	g := param("g", n, s.InWidth(), layers.Float64)
	build := func(gr *engine.Graph) *engine.Node {
		return gr.Sum(gr.Mul(gr.ConvTranspose2D(gr.Param(x), gr.Param(w), gr.Param(b), s), gr.Param(g)))
	}
	ref := func() float64 {
		out, _ := layers.ConvTransposeForward(nil, nil, x.F64(), w.F64(), b.F64(), n, s)
		var sum float64
		for i, v := range out {
			sum += v * g.F64()[i]
		}
		return sum
	}
	res, err := gradcheck.Check([]*layers.Param{x, w, b}, build, ref, 1e-5)
	require.NoError(t, err)
	require.Less(t, res.MaxRelErr, 1e-6, res.String())

	x32 := param("x32", n, s.OutWidth(), layers.Float32)
	w32 := param("w32", s.OutC, s.K(), layers.Float32)
	b32 := param("b32", 1, s.C, layers.Float32)
	gr := engine.NewGraph(layers.Float32)
	conv := gr.ConvTranspose2D(gr.Param(x32), gr.Param(w32), gr.Param(b32), s)
	prog, err := gr.Compile(gr.Sum(conv), engine.CompileOptions{Outputs: []*engine.Node{conv}})
	require.NoError(t, err)
	defer prog.Close()
	_, err = prog.Run(engine.RunOptions{})
	require.NoError(t, err)
	want, _ := layers.ConvTransposeForward(nil, nil, x32.F32(), w32.F32(), b32.F32(), n, s)
	require.Equal(t, want, prog.Output32(0))
}
