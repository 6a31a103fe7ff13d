package losses

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/gradcheck"
	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/stat/distuv"
)

// The likelihood, free-bits and labelled cross-entropy forms are checked
// against the reference functions (themselves checked against the golden
// values of testdata/losses) rearranged by hand, and their gradients by
// finite differences against those references.

const rows, cols = 5, 4

func randParam(name string, r, c int, rng *rand.Rand, lo, hi float64) *layers.Param {
	p := layers.NewParam(name, r, c, layers.Float64)
	for i := range p.F64() {
		p.F64()[i] = lo + (hi-lo)*rng.Float64()
	}
	return p
}

// rowsRepeated repeats a row of values rows times.
func rowsRepeated(row []float64, n int) []float64 {
	var out []float64
	for i := 0; i < n; i++ {
		out = append(out, row...)
	}
	return out
}

func constant(v float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = v
	}
	return out
}

type formCase struct {
	name   string
	params []*layers.Param
	graph  func(g *engine.Graph) *engine.Node
	ref    func() float64
}

func formCases() []formCase {
	rng := rand.New(rand.NewPCG(4, 2))
	x := randParam("x", rows, cols, rng, -1, 2)
	bits := randParam("bits", rows, cols, rng, 0, 1)
	mean := randParam("mean", rows, cols, rng, -1, 2)
	lvRow := randParam("lvrow", 1, cols, rng, -1, 1)
	lvOne := randParam("lvone", 1, 1, rng, -1, 1)
	mu := randParam("mu", rows, cols, rng, -1.5, 1.5)
	lv := randParam("lv", rows, cols, rng, -2, 1)
	logits := randParam("logits", rows, 3, rng, -2, 2)
	onehot := layers.NewParam("onehot", rows, 3, layers.Float64)
	labels := []int{2, -1, 0, 1, -1} // two unlabelled rows
	labelled := 0
	for r, l := range labels {
		if l >= 0 {
			onehot.F64()[r*3+l] = 1
			labelled++
		}
	}
	weight := layers.NewParam("weight", 1, 1, layers.Float64)
	weight.F64()[0] = 1 / float64(labelled)
	must := func(v float64, err error) float64 {
		if err != nil {
			panic(err)
		}
		return v
	}
	return []formCase{
		{"BernoulliNLL", []*layers.Param{mean},
			func(g *engine.Graph) *engine.Node { return GraphBernoulliNLL(g, g.Param(mean), g.Param(bits)) },
			func() float64 { return cols * must(BCEWithLogits(mean.F64(), bits.F64())) }},
		{"GaussianNLLFixed", []*layers.Param{x, mean},
			func(g *engine.Graph) *engine.Node { return GraphGaussianNLLFixed(g, g.Param(x), g.Param(mean), 0.7) },
			func() float64 {
				return cols * must(GaussianNLL(x.F64(), mean.F64(), constant(math.Log(0.7), rows*cols)))
			}},
		{"GaussianNLLColumns", []*layers.Param{lvRow, x, mean},
			func(g *engine.Graph) *engine.Node {
				return GraphGaussianNLLColumns(g, g.Param(x), g.Param(mean), g.Param(lvRow))
			},
			func() float64 {
				return cols * must(GaussianNLL(x.F64(), mean.F64(), rowsRepeated(lvRow.F64(), rows)))
			}},
		{"GaussianNLLShared", []*layers.Param{lvOne, x, mean},
			func(g *engine.Graph) *engine.Node {
				return GraphGaussianNLLShared(g, g.Param(x), g.Param(mean), g.Param(lvOne))
			},
			func() float64 {
				return cols * must(GaussianNLL(x.F64(), mean.F64(), constant(lvOne.F64()[0], rows*cols)))
			}},
		{"KLFreeBits", []*layers.Param{mu, lv},
			func(g *engine.Graph) *engine.Node { return GraphKLFreeBits(g, g.Param(mu), g.Param(lv), 0.4) },
			func() float64 {
				per := make([]float64, cols)
				must(KLStdNormal(mu.F64(), lv.F64(), cols, per))
				var s float64
				for _, v := range per {
					s += math.Max(v, 0.4)
				}
				return s
			}},
		{"LabelledCrossEntropy", []*layers.Param{logits},
			func(g *engine.Graph) *engine.Node {
				return GraphLabelledCrossEntropy(g, g.Param(logits), g.Param(onehot), g.Param(weight))
			},
			func() float64 {
				var lg, oh []float64
				for r, l := range labels {
					if l >= 0 {
						lg = append(lg, logits.F64()[r*3:r*3+3]...)
						oh = append(oh, onehot.F64()[r*3:r*3+3]...)
					}
				}
				return must(SoftmaxCrossEntropy(lg, oh, 3))
			}},
	}
}

func TestLikelihoodForms(t *testing.T) {
	for _, c := range formCases() {
		t.Run(c.name, func(t *testing.T) {
			g := engine.NewGraph(layers.Float64)
			prog, err := g.Compile(c.graph(g), engine.CompileOptions{})
			require.NoError(t, err)
			v, err := prog.Run(engine.RunOptions{})
			require.NoError(t, err)
			want := c.ref()
			// both sides float64, other summation orders
			require.InDelta(t, want, v, 1e-12*math.Abs(want)+1e-12)
			res, err := gradcheck.Check(c.params, c.graph, c.ref, 1e-4)
			require.NoError(t, err)
			require.Less(t, res.MaxRelErr, 1e-6, res.String())
		})
	}
}

// The element forms against gonum's normal density and against the
// reference reductions.
func TestElementForms(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	for i := 0; i < 200; i++ {
		z, eps := 4*rng.NormFloat64(), rng.NormFloat64()
		mu, lv := rng.NormFloat64(), 3*rng.Float64()-2
		sd := math.Exp(lv / 2)
		// gonum.org/v1/gonum/stat/distuv.Normal.LogProb
		require.InDelta(t, -distuv.UnitNormal.LogProb(z), StdNormalNLLElem(z), 1e-12)
		n := distuv.Normal{Mu: mu, Sigma: sd}
		require.InDelta(t, -n.LogProb(mu+sd*eps), ReparamNLLElem(eps, lv), 1e-10)
		require.InDelta(t, -n.LogProb(z), GaussianNLLElem(z, mu, lv), 1e-10*(1+math.Abs(n.LogProb(z))))
		ref, err := BCEWithLogits([]float64{z}, []float64{eps * eps / (1 + eps*eps)})
		require.NoError(t, err)
		require.Equal(t, ref, BCEWithLogitsElem(z, eps*eps/(1+eps*eps)))
		k, err := KLStdNormal([]float64{mu}, []float64{lv}, 1, nil)
		require.NoError(t, err)
		require.Equal(t, k, KLStdNormalElem(mu, lv))
		p := 0.01 + 0.98*rng.Float64()
		b, err := BCE([]float64{p}, []float64{0.3})
		require.NoError(t, err)
		require.InDelta(t, b, BCEProbabilityElem(p, 0.3), 1e-15)
	}
	// saturated probabilities stay finite
	require.InDelta(t, -math.Log(ProbabilityClamp), BCEProbabilityElem(0, 1), 1e-9)
	require.InDelta(t, -math.Log(ProbabilityClamp), BCEProbabilityElem(1, 0), 1e-6)
	require.Equal(t, math.Log(2*math.Pi), Log2Pi)
}
