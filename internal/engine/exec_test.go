package engine_test

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
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
	x := g.Input(handle("x"), rows, 6)
	eps := g.Input(handle("eps"), rows, 2)
	h := g.MLP(enc, x, nil) // rows x 4: mean and log-variance
	mu, lv := g.Slice(h, 0, 2), g.Slice(h, 2, 4)
	z := g.Add(g.Reparameterise(mu, lv, eps), g.Mul(g.Exp(g.Scale(lv, 0.5)), eps))
	logits := g.MLP(dec, z, nil)
	loss := g.Add(losses.GraphBCEWithLogits(g, logits, g.Sigmoid(x)), losses.GraphKLStdNormal(g, mu, lv))
	both := g.Concat(logits, g.Mul(g.Sub(g.Const(1), g.Tanh(z)), g.Sub(g.Tanh(z), g.Const(0.5))))
	w := g.Input(handle("w"), 1, 8)
	r := g.MulRow(g.AddRow(both, w), w)
	loss = g.Add(loss, g.Mean(g.Square(r)))
	loss = g.Add(loss, g.Scale(g.Sum(g.LogSoftmax(both)), -0.01))
	loss = g.Add(loss, losses.GraphMSE(g, g.Softplus(logits), x))
	loss = g.Add(loss, g.Scale(g.BCEWithLogitsSum(logits, g.Sigmoid(g.Neg(x))), 0.1))
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
						for i := range p.F32(handle(name)) {
							p.F32(handle(name))[i] = float32(rng.NormFloat64())
						}
					} else {
						for i := range p.F64(handle(name)) {
							p.F64(handle(name))[i] = rng.NormFloat64()
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

// The fused BCE sum: value against the float64 reference form of package
// losses (times the element count) in both precisions, gradient against
// sigmoid(x) - y, and the loss bitwise the same at 1 and 3 threads on a
// matrix big enough to be split.
func TestBCESum(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	for _, prec := range []layers.Precision{layers.Float32, layers.Float64} {
		for _, shape := range [][2]int{{2, 5}, {100, 784}} {
			r, c := shape[0], shape[1]
			xs, ys := make([]float64, r*c), make([]float64, r*c)
			for i := range xs {
				xs[i] = 6 * rng.NormFloat64()
				ys[i] = rng.Float64()
			}
			xs[0], xs[1] = 120, -95 // beyond vec.ExpNeg32's range
			px, py := layers.NewParam("x", r, c, prec), layers.NewParam("y", r, c, prec)
			require.NoError(t, px.SetValues(xs))
			require.NoError(t, py.SetValues(ys))
			py.SetFrozen(true)
			g := engine.NewGraph(prec)
			prog, err := g.Compile(g.Scale(g.BCEWithLogitsSum(g.Param(px), g.Param(py)), 0.5), engine.CompileOptions{Grad: true})
			require.NoError(t, err)
			var losses1 []float64
			for _, procs := range []int{1, 3} {
				old := runtime.GOMAXPROCS(procs)
				got, err := prog.Run(engine.RunOptions{})
				runtime.GOMAXPROCS(old)
				require.NoError(t, err)
				losses1 = append(losses1, got)
			}
			require.Equal(t, math.Float64bits(losses1[0]), math.Float64bits(losses1[1]), "loss at 1 and 3 threads")
			want, err := losses.BCEWithLogits(xs, ys)
			require.NoError(t, err)
			want *= 0.5 * float64(r*c)
			tol := 1e-12 * want
			if prec == layers.Float32 {
				tol = 1e-6 * want
			}
			require.InDelta(t, want, losses1[0], tol, "%v %dx%d", prec, r, c)
			for i, x := range xs {
				s := 1 / (1 + math.Exp(-x))
				require.InDelta(t, 0.5*(s-ys[i]), px.GradAt(i), 1e-7, "%v x=%v", prec, x)
			}
			require.NoError(t, prog.Close())
		}
	}
}

// The fused tanh, sigmoid and softplus in float32: values against Go's
// float64 math (the reference) and gradients against their closed forms,
// 1 - tanh^2, s (1 - s) and s, across saturation.
func TestFusedSquashFloat32(t *testing.T) {
	var xs []float64
	for x := -30.0; x <= 30; x += 0.37 {
		xs = append(xs, x)
	}
	xs = append(xs, 0, 1e-6, -1e-6, 95, -95)
	for _, kind := range []string{"tanh", "sigmoid", "softplus"} {
		px := layers.NewParam("x", 1, len(xs), layers.Float32)
		require.NoError(t, px.SetValues(xs))
		g := engine.NewGraph(layers.Float32)
		x := g.Param(px)
		y := g.Tanh(x)
		switch kind {
		case "sigmoid":
			y = g.Sigmoid(x)
		case "softplus":
			y = g.Softplus(x)
		}
		prog, err := g.Compile(g.Sum(y), engine.CompileOptions{Grad: true, Outputs: []*engine.Node{y}})
		require.NoError(t, err)
		_, err = prog.Run(engine.RunOptions{})
		require.NoError(t, err)
		for i, v := range xs {
			want := math.Tanh(float64(float32(v)))
			dwant := 1 - want*want
			switch kind {
			case "sigmoid":
				want = 1 / (1 + math.Exp(-float64(float32(v))))
				dwant = want * (1 - want)
			case "softplus":
				x := float64(float32(v))
				want = math.Max(x, 0) + math.Log1p(math.Exp(-math.Abs(x)))
				dwant = 1 / (1 + math.Exp(-x))
			}
			got := float64(prog.Output32(0)[i])
			require.InDelta(t, want, got, 1e-7+2e-7*math.Abs(want), "%s(%v)", kind, v)
			require.InDelta(t, dwant, px.GradAt(i), 2e-7, "%s'(%v)", kind, v)
		}
		require.NoError(t, prog.Close())
	}
}

// The word-wise scan for NaN and infinity finds each kind at every
// position, odd lengths included, and passes the largest finite values.
func TestFirstNonFinite(t *testing.T) {
	for _, n := range []int{0, 1, 2, 7, 8, 9, 33} {
		g := make([]float32, n)
		for i := range g {
			g[i] = float32(i) - 3
		}
		if n > 0 {
			g[0] = math.MaxFloat32
			g[n-1] = -math.MaxFloat32
		}
		require.Equal(t, -1, engine.FirstNonFinite(g), "n=%d all finite", n)
		for pos := 0; pos < n; pos++ {
			for _, bad := range []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))} {
				old := g[pos]
				g[pos] = bad
				require.Equal(t, pos, engine.FirstNonFinite(g), "n=%d %v at %d", n, bad, pos)
				if pos > 0 { // a slice off 8-byte alignment
					require.Equal(t, pos-1, engine.FirstNonFinite(g[1:]), "n=%d %v at %d, shifted", n, bad, pos)
				}
				g[pos] = old
			}
		}
	}
}

// The fused sum and scalar arithmetic: value and gradients against central
// differences of a float64 reference written out here,
// (sum A * sum B - 0.3 sum A) + mean B - sum A + 2 (common practice, no
// source).
func TestScalarArithmeticGradient(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 11))
	pa, pb := layers.NewParam("a", 2, 3, layers.Float64), layers.NewParam("b", 3, 2, layers.Float64)
	for _, p := range []*layers.Param{pa, pb} {
		for i := range p.F64() {
			p.F64()[i] = rng.NormFloat64()
		}
	}
	sum := func(v []float64) (s float64) {
		for _, x := range v {
			s += x
		}
		return s
	}
	ref := func() float64 {
		sa, sb := sum(pa.F64()), sum(pb.F64())
		return (sa*sb - 0.3*sa) + sb/6 - sa + 2
	}
	res, err := gradcheck.Check([]*layers.Param{pa, pb}, func(g *engine.Graph) *engine.Node {
		sa, sb := g.Sum(g.Param(pa)), g.Sum(g.Param(pb))
		l := g.Add(g.Sub(g.Mul(sa, sb), g.Scale(sa, 0.3)), g.Mean(g.Param(pb)))
		return g.Shift(g.Sub(l, sa), 2)
	}, ref, 1e-4)
	require.NoError(t, err)
	require.Less(t, res.MaxRelErr, 1e-7, res.String())
}

// AffineAct (the bias and leaky ReLU applied by the matrix product's
// goroutines, the gradient taken from the output) gives bitwise the loss,
// outputs and gradients of Affine followed by LeakyReLU, at slope 0 (ReLU)
// and 0.2, at one and two threads, with rows of zeros and a zero bias so
// that some pre-activations are exactly 0 or -0 (common practice, no
// source: the fused form must not change the arithmetic).
func TestAffineActMatchesUnfused(t *testing.T) {
	const rows, in, out = 128, 300, 200 // large enough for the shared product
	for _, prec := range []layers.Precision{layers.Float32, layers.Float64} {
		for _, slope := range []float64{0, 0.2} {
			for _, procs := range []int{1, 2} {
				run := func(fused bool) (float64, []float64, [][]float64) {
					old := runtime.GOMAXPROCS(procs)
					defer runtime.GOMAXPROCS(old)
					rng := rand.New(rand.NewPCG(4, 4))
					w := layers.NewParam("w", in, out, prec)
					b := layers.NewParam("b", 1, out, prec)
					for i := 0; i < in*out; i++ {
						w.SetAt(i, rng.NormFloat64()*0.1)
					}
					g := engine.NewGraph(prec)
					x := g.Input(handle("x"), rows, in)
					var h *engine.Node
					if fused {
						h = g.AffineAct(x, g.Param(w), g.Param(b), layers.LeakyReLU, slope)
					} else {
						h = g.LeakyReLU(g.Affine(x, g.Param(w), g.Param(b)), slope)
					}
					// a weighted sum: the gradient reaching h is nonzero where h is 0
					p, err := g.Compile(g.Sum(g.Mul(h, g.Input(handle("c"), rows, out))), engine.CompileOptions{Grad: true, Outputs: []*engine.Node{h}})
					require.NoError(t, err)
					defer p.Close()
					vals := make([]float64, rows*in)
					for i := range vals {
						if (i/in)%5 != 0 { // every fifth row stays zero
							vals[i] = rng.NormFloat64()
						}
					}
					cs := make([]float64, rows*out)
					for i := range cs {
						cs[i] = rng.NormFloat64()
					}
					if prec == layers.Float32 {
						for i, v := range vals {
							p.F32(handle("x"))[i] = float32(v)
						}
						for i, v := range cs {
							p.F32(handle("c"))[i] = float32(v)
						}
					} else {
						copy(p.F64(handle("x")), vals)
						copy(p.F64(handle("c")), cs)
					}
					loss, err := p.Run(engine.RunOptions{})
					require.NoError(t, err)
					var outs []float64
					if prec == layers.Float32 {
						for _, v := range p.Output32(0) {
							outs = append(outs, float64(v))
						}
					} else {
						outs = append(outs, p.Output64(0)...)
					}
					var grads [][]float64
					for _, q := range p.Params() {
						var gr []float64
						for i := 0; i < q.Len(); i++ {
							gr = append(gr, q.GradAt(i))
						}
						grads = append(grads, gr)
					}
					return loss, outs, grads
				}
				l0, o0, g0 := run(false)
				l1, o1, g1 := run(true)
				name := fmt.Sprintf("%v slope %v, %d threads", prec, slope, procs)
				require.Equal(t, math.Float64bits(l0), math.Float64bits(l1), name)
				require.Equal(t, o0, o1, name)
				require.Equal(t, g0, g1, name)
			}
		}
	}
}
