package engine_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/gradcheck"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/optim"
	"github.com/stretchr/testify/require"
)

func mlp(t testing.TB, seed uint64, prec layers.Precision, widths []int, hidden, out layers.Activation) *layers.MLP {
	m, err := layers.NewMLP(layers.MLPConfig{Name: "net", Widths: widths, Hidden: hidden, Output: out, LinearHidden: hidden == layers.Identity, LeakySlope: 0.2, Precision: prec}, rand.New(rand.NewPCG(seed, 1)))
	require.NoError(t, err)
	return m
}

// Every activation inside a dense stack: the graph's gradient against
// central differences of the graph-free float64 forward pass plus the
// reference MSE (an independent implementation of the same function).
func TestDenseGradientsAllActivations(t *testing.T) {
	acts := []layers.Activation{layers.Identity, layers.ReLU, layers.LeakyReLU, layers.ELU, layers.Tanh, layers.Sigmoid, layers.Softplus}
	for _, a := range acts {
		t.Run(a.String(), func(t *testing.T) {
			m := mlp(t, 3, layers.Float64, []int{3, 5, 2}, a, a)
			rng := rand.New(rand.NewPCG(4, 4))
			const rows = 4
			x := make([]float64, rows*3)
			y := make([]float64, rows*2)
			for i := range x {
				x[i] = rng.NormFloat64()
			}
			for i := range y {
				y[i] = rng.NormFloat64()
			}
			var ws layers.Workspace
			ref := func() float64 {
				out, err := m.Forward64(x, rows, &ws)
				require.NoError(t, err)
				v, err := losses.MSE(out, y)
				require.NoError(t, err)
				return v
			}
			// Graph forward equals the graph-free forward.
			res, err := gradcheck.Check(m.Params(), func(g *engine.Graph) *engine.Node {
				xi, yi := paramOf("x", rows, 3, x), paramOf("y", rows, 2, y)
				return losses.GraphMSE(g, g.MLP(m, g.Param(xi), nil), g.Param(yi))
			}, ref, 1e-4)
			require.NoError(t, err)
			require.Less(t, res.MaxRelErr, 1e-6, res.String())
		})
	}
}

func paramOf(name string, r, c int, v []float64) *layers.Param {
	p := layers.NewParam(name, r, c, layers.Float64)
	copy(p.F64(), v)
	p.SetFrozen(true)
	return p
}

// log-softmax, max and slicing compose correctly and differentiate.
func TestLogSoftmaxGradient(t *testing.T) {
	p := layers.NewParam("x", 3, 4, layers.Float64)
	rng := rand.New(rand.NewPCG(5, 5))
	for i := range p.F64() {
		p.F64()[i] = 3 * rng.NormFloat64()
	}
	tgt := []float64{1, 0, 0, 0, 0, 0.5, 0.5, 0, 0, 0, 0, 1}
	res, err := gradcheck.Check([]*layers.Param{p}, func(g *engine.Graph) *engine.Node {
		return losses.GraphSoftmaxCrossEntropy(g, g.Param(p), g.Param(paramOf("t", 3, 4, tgt)))
	}, func() float64 {
		v, _ := losses.SoftmaxCrossEntropy(p.F64(), tgt, 4)
		return v
	}, 1e-4)
	require.NoError(t, err)
	require.Less(t, res.MaxRelErr, 1e-6, res.String())

	q := layers.NewParam("q", 2, 5, layers.Float64)
	copy(q.F64(), []float64{1, 2, 3, 4, 5, -1, -2, -3, -4, -5})
	res, err = gradcheck.Check([]*layers.Param{q}, func(g *engine.Graph) *engine.Node {
		n := g.Param(q)
		a, b := g.Slice(n, 0, 2), g.Slice(n, 2, 5)
		return g.Sum(g.Square(g.Concat(g.Tanh(b), g.Sigmoid(a))))
	}, nil, 1e-4)
	require.NoError(t, err)
	require.Less(t, res.MaxRelErr, 1e-6, res.String())
}

func denseLoss(m *layers.MLP, rows int) engine.BuildFunc {
	return func(g *engine.Graph, batch int) (*engine.Node, []*engine.Node) {
		x := g.Input(handle("x"), batch, m.In())
		out := g.MLP(m, x, dropouts(m))
		return losses.GraphMSE(g, out, x), []*engine.Node{out}
	}
}

// Programs are built per batch size: a full batch, a final partial batch
// and a single row all work and agree with the graph-free forward pass.
func TestAnyBatchSize(t *testing.T) {
	m := mlp(t, 7, layers.Float32, []int{4, 3, 4}, layers.Tanh, layers.Identity)
	ph := engine.NewPhase(layers.Float32, false, denseLoss(m, 0))
	defer ph.Close()
	rng := rand.New(rand.NewPCG(8, 8))
	var ws layers.Workspace
	for _, b := range []int{16, 5, 1, 16} {
		p, err := ph.Program(b)
		require.NoError(t, err)
		x := p.F32(handle("x"))
		require.Len(t, x, b*4)
		for i := range x {
			x[i] = float32(rng.NormFloat64())
		}
		_, err = p.Run(engine.RunOptions{})
		require.NoError(t, err)
		want, err := m.Forward32(x, b, &ws)
		require.NoError(t, err)
		got := p.Output32(0)
		for i := range want {
			// float32 GEMMs in different orders: 1e-5 relative.
			require.InDelta(t, want[i], got[i], 1e-5*(1+math.Abs(float64(want[i]))))
		}
	}
}

// A run always resets: new inputs give a new loss, and the same inputs the
// same loss bitwise.
func TestRunResetsEachTime(t *testing.T) {
	m := mlp(t, 9, layers.Float32, []int{2, 2}, layers.Identity, layers.Identity)
	ph := engine.NewPhase(layers.Float32, true, denseLoss(m, 0))
	defer ph.Close()
	p, err := ph.Program(3)
	require.NoError(t, err)
	copy(p.F32(handle("x")), []float32{1, 2, 3, 4, 5, 6})
	a, err := p.Run(engine.RunOptions{})
	require.NoError(t, err)
	copy(p.F32(handle("x")), []float32{6, 5, 4, 3, 2, 1})
	b, err := p.Run(engine.RunOptions{})
	require.NoError(t, err)
	require.NotEqual(t, a, b)
	copy(p.F32(handle("x")), []float32{1, 2, 3, 4, 5, 6})
	c, err := p.Run(engine.RunOptions{})
	require.NoError(t, err)
	require.Equal(t, a, c)
	g1 := append([]float32(nil), m.Layers[0].W.Grad32()...)
	_, err = p.Run(engine.RunOptions{})
	require.NoError(t, err)
	require.Equal(t, g1, m.Layers[0].W.Grad32(), "gradients are replaced, not summed")
	_, err = p.Run(engine.RunOptions{Accumulate: true})
	require.NoError(t, err)
	for i, v := range m.Layers[0].W.Grad32() {
		require.InDelta(t, 2*g1[i], v, 1e-5*(1+math.Abs(float64(v))))
	}
}

func TestNonFiniteLossIsAnError(t *testing.T) {
	m := mlp(t, 9, layers.Float32, []int{2, 2}, layers.Identity, layers.Identity)
	ph := engine.NewPhase(layers.Float32, true, func(g *engine.Graph, b int) (*engine.Node, []*engine.Node) {
		x := g.Input(handle("x"), b, 2)
		return g.Mean(g.Log(g.MLP(m, x, nil))), nil
	})
	defer ph.Close()
	p, err := ph.Program(1)
	require.NoError(t, err)
	copy(p.F32(handle("x")), []float32{float32(math.NaN()), 1})
	_, err = p.Run(engine.RunOptions{})
	require.ErrorIs(t, err, engine.ErrNonFinite)
}

func TestUnusedParamHasNoGradient(t *testing.T) {
	m := mlp(t, 9, layers.Float64, []int{2, 2}, layers.Identity, layers.Identity)
	stray := layers.NewParam("stray", 1, 2, layers.Float64)
	g := engine.NewGraph(layers.Float64)
	x := g.Input(handle("x"), 1, 2)
	g.Param(stray)
	_, err := g.Compile(g.Sum(g.MLP(m, x, nil)), engine.CompileOptions{Grad: true})
	require.Error(t, err, "a parameter the loss does not reach must be reported")
}

func TestConstructionErrors(t *testing.T) {
	g := engine.NewGraph(layers.Float32)
	a := g.Input(handle("a"), 2, 3)
	b := g.Input(handle("b"), 2, 3)
	_ = g.MatMul(a, b)
	_, err := g.Compile(g.Sum(a), engine.CompileOptions{})
	require.ErrorContains(t, err, "do not chain")

	g = engine.NewGraph(layers.Float32)
	p := layers.NewParam("p", 1, 1, layers.Float64)
	_ = g.Param(p)
	_, err = g.Compile(g.Const(1), engine.CompileOptions{})
	require.ErrorContains(t, err, "float64")
}

// Graphs may be built from many goroutines at once (construction is
// serialised inside the engine); run under -race.
func TestConcurrentConstruction(t *testing.T) {
	var wg sync.WaitGroup
	errs := make(chan error, 8)
	for i := 0; i < 8; i++ {
		wg.Add(1)
		go func(i int) {
			defer wg.Done()
			m := mlp(t, uint64(i), layers.Float32, []int{3, 4, 3}, layers.ReLU, layers.Identity)
			ph := engine.NewPhase(layers.Float32, true, denseLoss(m, 0))
			defer ph.Close()
			p, err := ph.Program(2)
			if err != nil {
				errs <- err
				return
			}
			_, err = p.Run(engine.RunOptions{})
			errs <- err
		}(i)
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		require.NoError(t, err)
	}
}

// trainLosses trains a small autoencoder with dropout for steps steps from a
// seed and returns the loss sequence and final weights.
func trainLosses(t testing.TB, seed uint64, steps int) ([]float64, []float64) {
	m, err := layers.NewMLP(layers.MLPConfig{Widths: []int{6, 8, 3, 8, 6}, Hidden: layers.ELU, Dropout: 0.1}, rand.New(rand.NewPCG(seed, 0)))
	require.NoError(t, err)
	opt, err := optim.NewAdam(optim.AdamConfig{Rate: 0.01})
	require.NoError(t, err)
	ph := engine.NewPhase(layers.Float32, true, denseLoss(m, 0))
	defer ph.Close()
	rng := rand.New(rand.NewPCG(seed, 99))
	var out []float64
	for s := 0; s < steps; s++ {
		p, err := ph.Program(8)
		require.NoError(t, err)
		x := p.F32(handle("x"))
		for i := range x {
			x[i] = float32(rng.NormFloat64())
		}
		for i, d := range m.Layers {
			if d.Dropout > 0 {
				layers.DropoutMask(p.F32(dropouts(m)[i]), d.Dropout, rng)
			}
		}
		l, err := p.Run(engine.RunOptions{})
		require.NoError(t, err)
		require.NoError(t, opt.Update(p.Params()))
		out = append(out, l)
	}
	var w []float64
	for _, p := range m.Params() {
		w = append(w, p.Values()...)
	}
	return out, w
}

// Same seed, same data: bitwise the same initial weights, 100-step loss
// sequence and final weights.
func TestSeededTrainingIsBitwiseReproducible(t *testing.T) {
	l1, w1 := trainLosses(t, 42, 100)
	l2, w2 := trainLosses(t, 42, 100)
	require.Equal(t, l1, l2)
	require.Equal(t, w1, w2)
	l3, _ := trainLosses(t, 43, 100)
	require.NotEqual(t, l1, l3)
	require.Less(t, l1[99], l1[0], "training lowers the loss")
}

func TestClosedProgram(t *testing.T) {
	m := mlp(t, 1, layers.Float32, []int{2, 2}, layers.Identity, layers.Identity)
	ph := engine.NewPhase(layers.Float32, false, denseLoss(m, 0))
	p, err := ph.Program(1)
	require.NoError(t, err)
	require.NoError(t, ph.Close())
	_, err = p.Run(engine.RunOptions{})
	require.Error(t, err)
	require.False(t, errors.Is(err, engine.ErrNonFinite))
}

// The fused BCE-on-logits in float32 agrees with the float64 reference,
// including logits of +/-100, and its gradient is sigmoid(x) - y.
func TestFusedBCEFloat32(t *testing.T) {
	xs := []float64{-100, -3, -0.5, 0, 0.25, 4, 100, 17}
	ys := []float64{1, 0, 0.3, 1, 0, 0.9, 0, 1}
	px := layers.NewParam("x", 1, len(xs), layers.Float32)
	py := layers.NewParam("y", 1, len(xs), layers.Float32)
	require.NoError(t, px.SetValues(xs))
	require.NoError(t, py.SetValues(ys))
	py.SetFrozen(true)
	g := engine.NewGraph(layers.Float32)
	prog, err := g.Compile(g.Sum(g.BCEWithLogits(g.Param(px), g.Param(py))), engine.CompileOptions{Grad: true})
	require.NoError(t, err)
	defer prog.Close()
	got, err := prog.Run(engine.RunOptions{})
	require.NoError(t, err)
	want, _ := losses.BCEWithLogits(xs, ys)
	want *= float64(len(xs))
	require.InDelta(t, want, got, 1e-6*want)
	for i, x := range xs {
		s := 1 / (1 + math.Exp(-x))
		require.InDelta(t, s-ys[i], px.GradAt(i), 1e-6, "x=%v", x)
	}
}

// The graph-free forward pass runs the training graphs' matrix product and
// the same bias and activation arithmetic, so for every activation but ELU
// (which the graphs compose from other operations) it gives bitwise the
// values the graph gives (within 1e-5 in the openblas build, whose graphs
// multiply with OpenBLAS), at one and two threads and at a size that
// shares the product between goroutines (common practice, no source:
// scores must not depend on the path that computed them).
func TestForward32EqualsGraph(t *testing.T) {
	for _, act := range []layers.Activation{layers.ReLU, layers.LeakyReLU, layers.Identity, layers.Tanh, layers.Sigmoid, layers.Softplus} {
		for _, procs := range []int{1, 2} {
			old := runtime.GOMAXPROCS(procs)
			m := mlp(t, 11, layers.Float32, []int{300, 200, 7, 300}, act, layers.Identity)
			ph := engine.NewPhase(layers.Float32, false, denseLoss(m, 0))
			p, err := ph.Program(128)
			require.NoError(t, err)
			rng := rand.New(rand.NewPCG(12, 12))
			x := p.F32(handle("x"))
			for i := range x {
				x[i] = float32(rng.NormFloat64())
			}
			_, err = p.Run(engine.RunOptions{})
			require.NoError(t, err)
			var ws layers.Workspace
			want, err := m.Forward32(x, 128, &ws)
			require.NoError(t, err)
			got := p.Output32(0)
			for i := range want {
				if engine.BLASName() != "quern-gemm" {
					// the openblas build's graphs multiply with OpenBLAS,
					// in another order: 1e-5 relative
					require.InDelta(t, want[i], got[i], 1e-5*(1+math.Abs(float64(want[i]))))
					continue
				}
				require.Equal(t, math.Float32bits(got[i]), math.Float32bits(want[i]), "%v, %d threads: element %d: forward %v, graph %v", act, procs, i, want[i], got[i])
			}
			ph.Close()
			runtime.GOMAXPROCS(old)
		}
	}
}
