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
