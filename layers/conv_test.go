package layers

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"github.com/stretchr/testify/require"
)

type convCase struct {
	Name                    string
	N, C, H, W, OC, KH, KW  int
	Stride, Pad, OH, OW     int
	X, Weight, Bias, Out, G []float64
	DX, DWeight, DBias      []float64
	Source                  string
}

func loadConvGolden(t *testing.T) []convCase { return loadConvCases(t, "cases") }

func loadConvCases(t *testing.T, key string) []convCase {
	b, err := os.ReadFile("../testdata/conv/golden.json")
	require.NoError(t, err)
	var raw map[string]json.RawMessage
	require.NoError(t, json.Unmarshal(b, &raw))
	var g struct {
		Cases []struct {
			Name                                        string
			N, C, H, W, Oc, Kh, Kw, Stride, Pad, Oh, Ow int
			X, Weight, Bias, Out, G, Dx, Dweight, Dbias []float64
			Source                                      string
		}
	}
	require.NoError(t, json.Unmarshal([]byte(`{"cases":`+string(raw[key])+`}`), &g))
	var out []convCase
	for _, c := range g.Cases {
		out = append(out, convCase{c.Name, c.N, c.C, c.H, c.W, c.Oc, c.Kh, c.Kw, c.Stride, c.Pad, c.Oh, c.Ow,
			c.X, c.Weight, c.Bias, c.Out, c.G, c.Dx, c.Dweight, c.Dbias, c.Source})
	}
	require.NotEmpty(t, out)
	return out
}

// The convolution and its gradients against torch.nn.functional.conv2d and
// torch.autograd (testdata/conv/make_golden.py): odd sizes, stride 2,
// padding, several channels, a non-square kernel. float64 to 1e-12
// (relative to the largest value); float32 forward to 1e-5.
func TestConvGolden(t *testing.T) {
	for _, c := range loadConvGolden(t) {
		t.Run(c.Name, func(t *testing.T) {
			s := ConvShape{H: c.H, W: c.W, C: c.C, OutC: c.OC, KH: c.KH, KW: c.KW, Stride: c.Stride, Pad: c.Pad}
			require.NoError(t, s.Check())
			oh, ow := s.Out()
			require.Equal(t, [2]int{c.OH, c.OW}, [2]int{oh, ow})
			out, cols := ConvForward(nil, nil, c.X, c.Weight, c.Bias, c.N, s)
			near(t, c.Out, out, 1e-12, "output vs "+c.Source)
			dx := make([]float64, len(c.X))
			dw := make([]float64, len(c.Weight))
			db := make([]float64, len(c.Bias))
			ConvBackward(dx, dw, db, nil, c.G, cols, c.Weight, c.N, s)
			near(t, c.DX, dx, 1e-12, "input gradient")
			near(t, c.DWeight, dw, 1e-12, "weight gradient")
			near(t, c.DBias, db, 1e-12, "bias gradient")

			x32, w32, b32 := to32s(c.X), to32s(c.Weight), to32s(c.Bias)
			o32, _ := ConvForward(nil, nil, x32, w32, b32, c.N, s)
			got := make([]float64, len(o32))
			for i, v := range o32 {
				got[i] = float64(v)
			}
			near(t, c.Out, got, 1e-5, "float32 output")
			// float32 gradients, on the matrix product: 1e-4
			dx32, dw32, db32 := make([]float32, len(c.X)), make([]float32, len(c.Weight)), make([]float32, len(c.Bias))
			_, cols32 := ConvForward(nil, nil, x32, w32, b32, c.N, s)
			ConvBackward(dx32, dw32, db32, nil, to32s(c.G), cols32, w32, c.N, s)
			near(t, c.DX, to64s(dx32), 1e-4, "float32 input gradient")
			near(t, c.DWeight, to64s(dw32), 1e-4, "float32 weight gradient")
			near(t, c.DBias, to64s(db32), 1e-4, "float32 bias gradient")
		})
	}
}

func to64s(v []float32) []float64 {
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = float64(x)
	}
	return out
}

func to32s(v []float64) []float32 {
	out := make([]float32, len(v))
	for i, x := range v {
		out[i] = float32(x)
	}
	return out
}

// near checks every value within tol times the largest magnitude of want.
func near(t *testing.T, want, got []float64, tol float64, what string) {
	t.Helper()
	require.Len(t, got, len(want), what)
	scale := 1.0
	for _, v := range want {
		scale = math.Max(scale, math.Abs(v))
	}
	for i := range want {
		require.InDelta(t, want[i], got[i], tol*scale, "%s: element %d", what, i)
	}
}

// A kernel that does not fit, and zero sizes, are refused by Check.
func TestConvShapeCheck(t *testing.T) {
	require.Error(t, ConvShape{H: 2, W: 2, C: 1, OutC: 1, KH: 3, KW: 3, Stride: 1}.Check())
	require.Error(t, ConvShape{H: 4, W: 4, C: 0, OutC: 1, KH: 3, KW: 3, Stride: 1}.Check())
	require.Error(t, ConvShape{H: 4, W: 4, C: 1, OutC: 1, KH: 3, KW: 3, Stride: 0}.Check())
	require.NoError(t, ConvShape{H: 2, W: 2, C: 1, OutC: 1, KH: 3, KW: 3, Stride: 1, Pad: 1}.Check())
}

// The transposed convolution and its gradients against
// torch.nn.functional.conv_transpose2d and torch.autograd (stride 2 with
// output padding, a 2x3 kernel, a 4x4 kernel with padding), to 1e-12 in
// float64 relative to the largest value.
func TestConvTransposeGolden(t *testing.T) {
	for _, c := range loadConvCases(t, "transposed") {
		t.Run(c.Name, func(t *testing.T) {
			opad := c.OH - ((c.H-1)*c.Stride - 2*c.Pad + c.KH)
			s, err := TransposedShape(c.H, c.W, c.C, c.OC, c.KH, c.KW, c.Stride, c.Pad, opad)
			require.NoError(t, err)
			require.Equal(t, [2]int{c.OH, c.OW}, [2]int{s.H, s.W})
			out, _ := ConvTransposeForward(nil, nil, c.X, c.Weight, c.Bias, c.N, s)
			near(t, c.Out, out, 1e-12, "output vs "+c.Source)
			dx := make([]float64, len(c.X))
			dw := make([]float64, len(c.Weight))
			db := make([]float64, len(c.Bias))
			ConvTransposeBackward(dx, dw, db, nil, c.G, c.X, c.Weight, c.N, s)
			near(t, c.DX, dx, 1e-12, "input gradient")
			near(t, c.DWeight, dw, 1e-12, "weight gradient")
			near(t, c.DBias, db, 1e-12, "bias gradient")
			x32, w32, b32 := to32s(c.X), to32s(c.Weight), to32s(c.Bias)
			o32, _ := ConvTransposeForward(nil, nil, x32, w32, b32, c.N, s)
			near(t, c.Out, to64s(o32), 1e-5, "float32 output")
			dx32, dw32, db32 := make([]float32, len(c.X)), make([]float32, len(c.Weight)), make([]float32, len(c.Bias))
			ConvTransposeBackward(dx32, dw32, db32, nil, to32s(c.G), x32, w32, c.N, s)
			near(t, c.DX, to64s(dx32), 1e-4, "float32 input gradient")
			near(t, c.DWeight, to64s(dw32), 1e-4, "float32 weight gradient")
			near(t, c.DBias, to64s(db32), 1e-4, "float32 bias gradient")
		})
	}
	_, err := TransposedShape(4, 4, 1, 1, 3, 3, 2, 1, 2)
	require.ErrorContains(t, err, "output padding 2")
}

// The encoder half of the convolutional VAE step at batch 128:
// 28x28x1 to 14x14x32 to 7x7x64 (3x3, stride 2, padding 1), forward and
// backward, float32 (go test -bench Conv ./layers).
func BenchmarkConvEncoder(b *testing.B) {
	s1 := ConvShape{H: 28, W: 28, C: 1, OutC: 32, KH: 3, KW: 3, Stride: 2, Pad: 1}
	s2 := ConvShape{H: 14, W: 14, C: 32, OutC: 64, KH: 3, KW: 3, Stride: 2, Pad: 1}
	n := 128
	x := make([]float32, n*s1.InWidth())
	for i := range x {
		x[i] = float32(i%17) / 17
	}
	w1, b1 := make([]float32, s1.OutC*s1.K()), make([]float32, s1.OutC)
	w2, b2 := make([]float32, s2.OutC*s2.K()), make([]float32, s2.OutC)
	for i := range w1 {
		w1[i] = float32(i%7-3) / 10
	}
	for i := range w2 {
		w2[i] = float32(i%5-2) / 10
	}
	var h1, c1, h2, c2, d1, d2, dc1, dc2 []float32
	dw1, db1, dw2, db2 := make([]float32, len(w1)), make([]float32, len(b1)), make([]float32, len(w2)), make([]float32, len(b2))
	dh1 := make([]float32, n*s2.InWidth())
	b.ResetTimer()
	for range b.N {
		h1, c1 = ConvForward(h1, c1, x, w1, b1, n, s1)
		h2, c2 = ConvForward(h2, c2, h1, w2, b2, n, s2)
		if d2 == nil {
			d2 = make([]float32, len(h2))
			d1 = make([]float32, len(x))
		}
		copy(d2, h2)
		dc2 = ConvBackward(dh1, dw2, db2, dc2, d2, c2, w2, n, s2)
		dc1 = ConvBackward(d1, dw1, db1, dc1, dh1, c1, w1, n, s1)
	}
}

// A ConvPlan's networks: the shapes a loader checks equal the parameters
// made, a plan that does not fit is refused with the reason, and a
// float64 network's graph-free pass equals float32's within rounding.
func TestConvPlanNetworks(t *testing.T) {
	for _, out := range []bool{false, true} {
		plan := ConvPlan{Image: [3]int{28, 28, 1}, Channels: []int{32, 64}, Out: out}
		widths := []int{784, 16}
		if out {
			widths = []int{16, 784}
		}
		cfg := MLPConfig{Name: "net", Widths: widths, Conv: &plan}
		m, err := NewMLP(cfg, rand.New(rand.NewPCG(1, 2)))
		require.NoError(t, err)
		var got []ParamShape
		for _, p := range m.Params() {
			r, c := p.Shape()
			got = append(got, ParamShape{Name: p.Name(), Rows: r, Cols: c})
		}
		require.Equal(t, cfg.ParamShapes(), got)
		// 28 -> 14 -> 7: the dense part meets 7x7x64 maps
		require.Equal(t, 7*7*64, plan.InnerWidth())
		if out {
			require.Equal(t, "net.conv1.weight", got[2].Name)
			require.Equal(t, []int{64, 9 * 32}, []int{got[2].Rows, got[2].Cols})
			require.Equal(t, 1, got[len(got)-1].Cols, "last bias: one image channel")
		} else {
			require.Equal(t, "net.conv0.weight", got[0].Name)
			require.Equal(t, []int{32, 9}, []int{got[0].Rows, got[0].Cols})
		}
	}
	for _, tc := range []struct {
		plan   ConvPlan
		widths []int
		want   string
	}{
		{ConvPlan{Image: [3]int{28, 28, 1}, Channels: []int{8}}, []int{780, 4}, "not the 784 of 28x28x1 images"},
		{ConvPlan{Image: [3]int{2, 2, 1}, Channels: []int{8, 8}, Kernel: 4}, []int{4, 4}, "too small"},
		{ConvPlan{Image: [3]int{4, 4, 1}, Channels: []int{0}}, []int{16, 4}, "0 channels"},
		{ConvPlan{Image: [3]int{4, 0, 1}, Channels: []int{2}}, []int{16, 4}, "images of 4x0"},
		{ConvPlan{Image: [3]int{4, 4, 1}}, []int{16, 4}, "0 convolutions"},
	} {
		_, err := NewMLP(MLPConfig{Widths: tc.widths, Conv: &tc.plan}, rand.New(rand.NewPCG(1, 2)))
		require.ErrorIs(t, err, ErrConfig)
		require.ErrorContains(t, err, tc.want)
	}
}
