package engine_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/stat"
)

// Reparameterisation gradient (the VAE's sample): for f(z) = z^2 with z ~ N(mu, sigma^2),
// E f = mu^2 + sigma^2, so dE/dmu = 2 mu and dE/dsigma = 2 sigma
// (closed form). The Monte Carlo gradient through z = mu + sigma*eps, as
// the training graph builds it, lies within 3 standard errors.
func TestReparameterisationGradient(t *testing.T) {
	const n = 4000
	mu, sigma := 0.7, 1.3
	pm := layers.NewParam("mu", 1, 1, layers.Float64)
	plv := layers.NewParam("logvar", 1, 1, layers.Float64)
	pm.F64()[0], plv.F64()[0] = mu, 2*math.Log(sigma)
	g := engine.NewGraph(layers.Float64)
	epsIn, onesIn := engine.NewInput("eps"), engine.NewInput("ones")
	eps := g.Input(epsIn, n, 1)
	ones := g.Input(onesIn, n, 1)
	// broadcast the 1x1 parameters over n rows: ones * mu
	m := g.Mul(ones, g.Sum(g.Param(pm)))
	lv := g.Mul(ones, g.Sum(g.Param(plv)))
	z := g.Reparameterise(m, lv, eps)
	prog, err := g.Compile(g.Mean(g.Square(z)), engine.CompileOptions{Grad: true})
	require.NoError(t, err)
	defer prog.Close()
	rng := rand.New(rand.NewPCG(1, 1))
	e := prog.F64(epsIn)
	for i := range e {
		e[i] = rng.NormFloat64()
		prog.F64(onesIn)[i] = 1
	}
	_, err = prog.Run(engine.RunOptions{})
	require.NoError(t, err)
	gMu := pm.Grad64()[0]
	gSigma := plv.Grad64()[0] * 2 / sigma // d lv / d sigma = 2/sigma
	// per-sample gradients for the standard errors
	var smu, ssig []float64
	for _, x := range e {
		zz := mu + sigma*x
		smu = append(smu, 2*zz)
		ssig = append(ssig, 2*zz*x)
	}
	_, sdMu := stat.MeanStdDev(smu, nil)
	_, sdSig := stat.MeanStdDev(ssig, nil)
	t.Logf("d/dmu %.4f (exact %.4f, se %.4f); d/dsigma %.4f (exact %.4f, se %.4f)", gMu, 2*mu, sdMu/math.Sqrt(n), gSigma, 2*sigma, sdSig/math.Sqrt(n))
	require.InDelta(t, 2*mu, gMu, 3*sdMu/math.Sqrt(n))
	require.InDelta(t, 2*sigma, gSigma, 3*sdSig/math.Sqrt(n))
}
