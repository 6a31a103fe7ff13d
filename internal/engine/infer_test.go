package engine_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

// graphForward runs net through a compiled graph on rows of x.
func graphForward(t *testing.T, net *layers.MLP, x []float64, rows int) []float64 {
	g := engine.NewGraph(layers.Float64)
	in := g.Input(handle("x"), rows, net.In())
	out := g.MLP(net, in, nil)
	p, err := g.Compile(g.Sum(out), engine.CompileOptions{Outputs: []*engine.Node{out}})
	require.NoError(t, err)
	defer p.Close()
	copy(p.F64(handle("x")), x)
	_, err = p.Run(engine.RunOptions{})
	require.NoError(t, err)
	return append([]float64(nil), p.Output64(0)...)
}

func within(t *testing.T, want []float64, got []float32, what string) {
	require.Len(t, got, len(want))
	for i := range want {
		// float64 networks; the graph-free path returns float32, so the
		// comparison is at float32 resolution: 1e-6 relative (and 1e-6
		// absolute near zero).
		require.InDelta(t, want[i], float64(got[i]), 1e-6*math.Max(1, math.Abs(want[i])), "%s[%d]", what, i)
	}
}

func randRows(rows, cols int, seed uint64) ([]float32, []float64) {
	rng := rand.New(rand.NewPCG(seed, 1))
	x32 := make([]float32, rows*cols)
	x64 := make([]float64, rows*cols)
	for i := range x32 {
		x32[i] = float32(rng.NormFloat64())
		x64[i] = float64(x32[i])
	}
	return x32, x64
}

// The graph-free inference of every model kind equals the training graph's
// forward pass, on odd batch sizes.
func TestInferenceMatchesGraph(t *testing.T) {
	for _, rows := range []int{1, 3, 17} {
		a, err := ae.New(ae.Config{Inputs: 7, Hidden: []int{5}, Latent: 3, Activation: layers.ELU, Scaling: data.ScaleNone, Precision: layers.Float64, Seed: 1})
		require.NoError(t, err)
		x32, x64 := randRows(rows, 7, uint64(rows))
		code, err := a.Encode(x32, rows)
		require.NoError(t, err)
		wantCode := graphForward(t, a.Encoder, x64, rows)
		within(t, wantCode, code, "ae code")
		dec, err := a.Decode(code, rows)
		require.NoError(t, err)
		c64 := make([]float64, len(code))
		for i, v := range code {
			c64[i] = float64(v)
		}
		within(t, graphForward(t, a.Decoder, c64, rows), dec, "ae decode")

		v, err := vae.New(vae.Config{Inputs: 7, Hidden: []int{6}, Latent: 2, Likelihood: vae.Gaussian, Scaling: data.ScaleNone, Precision: layers.Float64, Seed: 2})
		require.NoError(t, err)
		mu, err := v.Encode(x32, rows)
		require.NoError(t, err)
		h := graphForward(t, v.Encoder, x64, rows)
		var wantMu []float64
		for r := 0; r < rows; r++ {
			wantMu = append(wantMu, h[r*4:r*4+2]...)
		}
		within(t, wantMu, mu, "vae mean")
		s, err := v.Decode(mu, rows)
		require.NoError(t, err)
		m64 := make([]float64, len(mu))
		for i, x := range mu {
			m64[i] = float64(x)
		}
		within(t, graphForward(t, v.Decoder, m64, rows), s, "vae decode")

		gm, err := gan.New(gan.Config{Outputs: 7, Noise: 4, GenHidden: []int{8}, DiscHidden: []int{8}, Scaling: data.ScaleNone, Precision: layers.Float64, Seed: 3})
		require.NoError(t, err)
		out, err := gm.Generate(rows, 9, -1)
		require.NoError(t, err)
		z := gan.NoiseRows(rows, 4, 9)
		within(t, graphForward(t, gm.Generator, z, rows), out, "gan generate")
	}
}
