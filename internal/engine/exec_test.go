package engine_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/gradcheck"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/stretchr/testify/require"
)

// buildMixed builds a loss that goes through most of the graph operations
// the models use: fused dense layers, slicing and concatenation, the
// reparameterised sample, broadcasts, reductions, log-softmax and several
// losses.
func buildMixed(g *engine.Graph, enc, dec *layers.MLP, rows int) *engine.Node {
	x := g.Input("x", rows, 6)
	eps := g.Input("eps", rows, 2)
	h := g.MLP(enc, x, false) // rows x 4: mean and log-variance
	mu, lv := g.Slice(h, 0, 2), g.Slice(h, 2, 4)
	z := g.Add(g.Reparameterise(mu, lv, eps), g.Mul(g.Exp(g.Scale(lv, 0.5)), eps))
	logits := g.MLP(dec, z, false)
	loss := g.Add(losses.GraphBCEWithLogits(g, logits, g.Sigmoid(x)), losses.GraphKLStdNormal(g, mu, lv))
	both := g.Concat(logits, g.Tanh(z))
	w := g.Input("w", 1, 8)
	r := g.MulRow(g.AddRow(both, w), w)
	loss = g.Add(loss, g.Mean(g.Square(r)))
	loss = g.Add(loss, g.Scale(g.Sum(g.LogSoftmax(both)), -0.01))
	loss = g.Add(loss, losses.GraphMSE(g, g.Softplus(logits), x))
	loss = g.Add(loss, g.Mean(g.Div(g.Abs(g.Sub(x, logits)), g.Shift(g.Square(x), 1))))
	return g.Add(loss, g.Mean(g.Log1p(g.Square(g.MatMul(g.Neg(z), g.Reshape(w, 2, 4))))))
}

// Our executor and gorgonia's own tape machine compute the same loss and
// gradients, bitwise, on a graph of mixed operations, in both precisions,
// run after run (no state leaks between runs).
func TestExecutorMatchesTapeMachine(t *testing.T) {
	for _, prec := range []layers.Precision{layers.Float32, layers.Float64} {
		t.Run(prec.String(), func(t *testing.T) {
			const rows = 5
			newMLP := func(name string, widths []int, seed uint64) *layers.MLP {
				m, err := layers.NewMLP(layers.MLPConfig{Name: name, Widths: widths, Hidden: layers.LeakyReLU, LeakySlope: 0.2, Precision: prec}, rand.New(rand.NewPCG(seed, 1)))
				require.NoError(t, err)
				return m
			}
			enc, dec := newMLP("enc", []int{6, 7, 4}, 1), newMLP("dec", []int{2, 7, 6}, 2)
			g := engine.NewGraph(prec)
			p, err := g.Compile(buildMixed(g, enc, dec, rows), engine.CompileOptions{Grad: true})
			require.NoError(t, err)
			defer p.Close()
			rng := rand.New(rand.NewPCG(7, 7))
			for run := 0; run < 3; run++ {
				for _, name := range []string{"x", "eps", "w"} {
					if prec == layers.Float32 {
						for i := range p.Input32(name) {
							p.Input32(name)[i] = float32(rng.NormFloat64())
						}
					} else {
						for i := range p.Input64(name) {
							p.Input64(name)[i] = rng.NormFloat64()
						}
					}
				}
				loss, err := p.Run(engine.RunOptions{})
				require.NoError(t, err)
				var ours [][]float64
				for _, q := range p.Params() {
					var gr []float64
					if prec == layers.Float32 {
						for _, v := range q.Grad32() {
							gr = append(gr, float64(v))
						}
					} else {
						gr = append(gr, q.Grad64()...)
					}
					ours = append(ours, gr)
				}
				tapeLoss, tapeGrads, err := engine.TapeRun(p)
				require.NoError(t, err)
				require.Equal(t, math.Float64bits(tapeLoss), math.Float64bits(loss), "run %d: loss %v against the tape machine's %v", run, loss, tapeLoss)
				require.Len(t, tapeGrads, len(ours))
				for i := range ours {
					require.Equal(t, tapeGrads[i], ours[i], "run %d: gradient of %s", run, p.Params()[i].Name())
				}
			}
		})
	}
}

// The fused reparameterised sample: value and gradients with respect to
// mu, the log-variance and eps against central differences of a float64
// reference written out here (z = mu + exp(lv/2) eps, loss = sum c z^2
// with fixed weights c; common practice, no source).
func TestReparameteriseGradient(t *testing.T) {
	const rows, cols = 3, 4
	rng := rand.New(rand.NewPCG(9, 9))
	newP := func(name string, scale float64) *layers.Param {
		p := layers.NewParam(name, rows, cols, layers.Float64)
		for i := range p.F64() {
			p.F64()[i] = scale * rng.NormFloat64()
		}
		return p
	}
	mu, lv, eps := newP("mu", 1), newP("lv", 0.7), newP("eps", 1)
	c := paramOf("c", rows, cols, []float64{0.3, -1.2, 0.8, 2, -0.4, 1.1, 0.9, -0.6, 1.5, 0.2, -2, 0.7})
	ref := func() float64 {
		var s float64
		for i := range mu.F64() {
			z := mu.F64()[i] + math.Exp(lv.F64()[i]/2)*eps.F64()[i]
			s += c.F64()[i] * z * z
		}
		return s
	}
	res, err := gradcheck.Check([]*layers.Param{mu, lv, eps}, func(g *engine.Graph) *engine.Node {
		z := g.Reparameterise(g.Param(mu), g.Param(lv), g.Param(eps))
		return g.Sum(g.Mul(g.Param(c), g.Mul(z, z)))
	}, ref, 1e-4)
	require.NoError(t, err)
	require.Less(t, res.MaxRelErr, 1e-7, res.String())
}
