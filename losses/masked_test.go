package losses

import (
	"math"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/gradcheck"
	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
)

// MaskedMSE with a mask of ones is the golden MSE (torch.nn.functional.
// mse_loss, testdata/losses/golden.json); with a mask, the masked
// elements' targets do not matter and the rest count as in MSE (by the
// definition); the graph form agrees with the reference to 1e-12 and its
// gradients with finite differences to 1e-6 (relative).
func TestMaskedMSE(t *testing.T) {
	n := 0
	for _, c := range loadGolden(t) {
		if c.Fn != "MSE" {
			continue
		}
		n++
		p, y := c.Args["pred"], c.Args["target"]
		ones := make([]float64, len(p))
		for i := range ones {
			ones[i] = 1
		}
		got, err := MaskedMSE(p, y, ones)
		require.NoError(t, err)
		require.InDelta(t, c.Value, got, 1e-12*math.Abs(c.Value)+1e-13, c.Name)

		mask := make([]float64, len(p))
		y2 := append([]float64(nil), y...)
		var want float64
		for i := range mask {
			if i%3 != 1 {
				mask[i] = 1
				want += (p[i] - y[i]) * (p[i] - y[i])
			} else {
				y2[i] += 1e3 // a target under the mask: no effect
			}
		}
		want /= float64(len(p))
		got, err = MaskedMSE(p, y2, mask)
		require.NoError(t, err)
		require.InDelta(t, want, got, 1e-12*want+1e-13, c.Name)

		// the graph form, and its gradients
		rows, cols := 1, len(p)
		if c.Dim > 0 {
			rows, cols = len(p)/c.Dim, c.Dim
		}
		pp := layers.NewParam("pred", rows, cols, layers.Float64)
		copy(pp.F64(), p)
		tp := layers.NewParam("target", rows, cols, layers.Float64)
		copy(tp.F64(), y2)
		mp := layers.NewParam("mask", rows, cols, layers.Float64)
		copy(mp.F64(), mask)
		build := func(g *engine.Graph) *engine.Node {
			return GraphMaskedMSE(g, g.Param(pp), g.Param(tp), g.Param(mp))
		}
		g := engine.NewGraph(layers.Float64)
		prog, err := g.Compile(build(g), engine.CompileOptions{})
		require.NoError(t, err)
		v, err := prog.Run(engine.RunOptions{})
		prog.Close()
		require.NoError(t, err)
		require.InDelta(t, want, v, 1e-12*want+1e-13, c.Name)
		res, err := gradcheck.Check([]*layers.Param{pp}, build, func() float64 {
			v, err := MaskedMSE(pp.F64(), tp.F64(), mp.F64())
			require.NoError(t, err)
			return v
		}, 1e-4)
		require.NoError(t, err)
		require.Less(t, res.MaxRelErr, 1e-6, res.String())
	}
	require.NotZero(t, n, "golden MSE cases")
	_, err := MaskedMSE([]float64{1}, []float64{1}, []float64{1, 1})
	require.Error(t, err)
}

// GaussianNLLMasked with a mask of ones is the golden Gaussian negative
// log-likelihood times the element count (testdata/losses/golden.json,
// torch.nn.functional.gaussian_nll_loss with full=True); the graph form,
// for one log-variance per column, one for all and a fixed variance,
// agrees with the reference under a mask to 1e-12 and its gradients with
// finite differences to 1e-6 (relative).
func TestGaussianNLLMasked(t *testing.T) {
	n := 0
	for _, c := range loadGolden(t) {
		if c.Fn != "GaussianNLL" {
			continue
		}
		n++
		x := c.Args["x"]
		ones := make([]float64, len(x))
		for i := range ones {
			ones[i] = 1
		}
		got, err := GaussianNLLMasked(x, c.Args["mu"], c.Args["logvar"], ones, 1)
		require.NoError(t, err)
		want := c.Value * float64(len(x))
		require.InDelta(t, want, got, 1e-12*math.Abs(want)+1e-13, c.Name)
	}
	require.NotZero(t, n, "golden Gaussian cases")

	rows, cols := 3, 4
	param := func(name string, r, c int, f func(i int) float64) *layers.Param {
		p := layers.NewParam(name, r, c, layers.Float64)
		for i := range p.F64() {
			p.F64()[i] = f(i)
		}
		return p
	}
	xp := param("x", rows, cols, func(i int) float64 { return math.Sin(float64(i)) * 2 })
	mp := param("mean", rows, cols, func(i int) float64 { return math.Cos(float64(3 * i)) })
	maskp := param("mask", rows, cols, func(i int) float64 { return float64((i % 5) % 2) })
	for _, kind := range []string{"columns", "shared", "fixed"} {
		t.Run(kind, func(t *testing.T) {
			var lv *layers.Param
			variance := 0.0
			switch kind {
			case "columns":
				lv = param("logvar", 1, cols, func(i int) float64 { return 0.3*float64(i) - 0.5 })
			case "shared":
				lv = param("logvar", 1, 1, func(int) float64 { return -0.7 })
			case "fixed":
				lv = param("logvar", 1, 1, func(int) float64 { return 0 })
				variance = 0.5
			}
			ref := func() float64 {
				lvs := make([]float64, rows*cols)
				for i := range lvs {
					switch kind {
					case "columns":
						lvs[i] = lv.F64()[i%cols]
					case "shared":
						lvs[i] = lv.F64()[0]
					case "fixed":
						lvs[i] = math.Log(variance)
					}
				}
				v, err := GaussianNLLMasked(xp.F64(), mp.F64(), lvs, maskp.F64(), rows)
				require.NoError(t, err)
				return v
			}
			build := func(g *engine.Graph) *engine.Node {
				mean := g.Param(mp)
				lvn := mean // ignored under a fixed variance
				if variance == 0 {
					lvn = g.Param(lv)
				}
				return GraphGaussianNLLMasked(g, g.Param(xp), mean, lvn, g.Param(maskp), variance)
			}
			g := engine.NewGraph(layers.Float64)
			prog, err := g.Compile(build(g), engine.CompileOptions{})
			require.NoError(t, err)
			v, err := prog.Run(engine.RunOptions{})
			prog.Close()
			require.NoError(t, err)
			want := ref()
			require.InDelta(t, want, v, 1e-12*math.Abs(want)+1e-13)
			ps := []*layers.Param{mp}
			if variance == 0 {
				ps = append(ps, lv)
			}
			res, err := gradcheck.Check(ps, build, ref, 1e-4)
			require.NoError(t, err)
			require.Less(t, res.MaxRelErr, 1e-6, res.String())
		})
	}
}

// The fused grouped cross-entropy in float32 (the training precision)
// agrees with the float64 reference on the golden case to 1e-5 relative
// (float32 inputs, float64 sums inside the kernel), and so does its
// gradient with respect to the logits: p*T - t over rows, worked from
// the reference's definition.
func TestGroupedSoftmaxCEFloat32(t *testing.T) {
	n := 0
	for _, c := range loadGolden(t) {
		if c.Fn != "GroupedSoftmaxCrossEntropy" {
			continue
		}
		n++
		x, tt := c.Args["x"], c.Args["t"]
		rows, cols := len(x)/c.Dim, c.Dim
		xp := layers.NewParam("x", rows, cols, layers.Float32)
		tp := layers.NewParam("t", rows, cols, layers.Float32)
		for i := range x {
			xp.F32()[i], tp.F32()[i] = float32(x[i]), float32(tt[i])
		}
		g := engine.NewGraph(layers.Float32)
		prog, err := g.Compile(GraphGroupedSoftmaxCE(g, g.Param(xp), g.Param(tp), c.Spans), engine.CompileOptions{Grad: true})
		require.NoError(t, err)
		v, err := prog.Run(engine.RunOptions{})
		require.NoError(t, err)
		require.InDelta(t, c.Value, v, 1e-5*c.Value)
		grad := xp.Grad32()
		for r := range rows {
			for _, sp := range c.Spans {
				var total, z float64
				for k := sp[0]; k < sp[1]; k++ {
					total += tt[r*cols+k]
					z += math.Exp(x[r*cols+k])
				}
				for k := sp[0]; k < sp[1]; k++ {
					want := (math.Exp(x[r*cols+k])/z*total - tt[r*cols+k]) / float64(rows)
					require.InDelta(t, want, float64(grad[r*cols+k]), 1e-6, "row %d column %d", r, k)
				}
			}
		}
		prog.Close()
	}
	require.NotZero(t, n)
}

// BernoulliNLLMasked with a mask of ones is the golden binary
// cross-entropy on logits times the element count
// (torch.nn.functional.binary_cross_entropy_with_logits, golden.json);
// the graph form agrees with the reference under a mask to 1e-12 and its
// gradient with finite differences to 1e-6 (relative).
func TestBernoulliNLLMasked(t *testing.T) {
	n := 0
	for _, c := range loadGolden(t) {
		if c.Fn != "BCEWithLogits" {
			continue
		}
		n++
		x, y := c.Args["x"], c.Args["y"]
		ones := make([]float64, len(x))
		mask := make([]float64, len(x))
		for i := range ones {
			ones[i] = 1
			mask[i] = float64(i % 2)
		}
		got, err := BernoulliNLLMasked(x, y, ones, 1)
		require.NoError(t, err)
		want := c.Value * float64(len(x))
		require.InDelta(t, want, got, 1e-12*math.Abs(want)+1e-13, c.Name)

		// the moderate logits (at +-100 a finite difference of the sum
		// is rounding noise)
		var xs, ys, ms []float64
		for i := range x {
			if math.Abs(x[i]) < 50 {
				xs, ys, ms = append(xs, x[i]), append(ys, y[i]), append(ms, mask[i])
			}
		}
		xp := layers.NewParam("x", 1, len(xs), layers.Float64)
		yp := layers.NewParam("y", 1, len(xs), layers.Float64)
		mp := layers.NewParam("mask", 1, len(xs), layers.Float64)
		copy(xp.F64(), xs)
		copy(yp.F64(), ys)
		copy(mp.F64(), ms)
		ref := func() float64 {
			v, err := BernoulliNLLMasked(xp.F64(), yp.F64(), mp.F64(), 1)
			require.NoError(t, err)
			return v
		}
		build := func(g *engine.Graph) *engine.Node {
			return GraphBernoulliNLLMasked(g, g.Param(xp), g.Param(yp), g.Param(mp))
		}
		g := engine.NewGraph(layers.Float64)
		prog, err := g.Compile(build(g), engine.CompileOptions{})
		require.NoError(t, err)
		v, err := prog.Run(engine.RunOptions{})
		prog.Close()
		require.NoError(t, err)
		require.InDelta(t, ref(), v, 1e-12*math.Abs(v)+1e-13)
		res, err := gradcheck.Check([]*layers.Param{xp}, build, ref, 1e-4)
		require.NoError(t, err)
		require.Less(t, res.MaxRelErr, 1e-6, res.String())
	}
	require.NotZero(t, n)
}
