package losses

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

func dirichlet(rng *rand.Rand, n int) []float64 {
	p := make([]float64, n)
	var s float64
	for i := range p {
		p[i] = rng.ExpFloat64()
		s += p[i]
	}
	for i := range p {
		p[i] /= s
	}
	return p
}

// Properties of divergences (Gibbs' inequality; common practice, no source
// beyond the definitions): non-negative, zero at equal arguments, and KL
// is not symmetric.
func TestDivergenceProperties(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	for trial := 0; trial < 50; trial++ {
		p, q := dirichlet(rng, 5), dirichlet(rng, 5)
		kl, err := KL(p, q)
		require.NoError(t, err)
		require.GreaterOrEqual(t, kl, 0.0)
		self, _ := KL(p, p)
		require.InDelta(t, 0, self, 1e-15)
		js, _ := JensenShannon(p, q)
		require.GreaterOrEqual(t, js, 0.0)
		require.LessOrEqual(t, js, math.Ln2)
		js2, _ := JensenShannon(q, p)
		require.InDelta(t, js, js2, 1e-15)
		ce, _ := CrossEntropy(p, q)
		hp, _ := CrossEntropy(p, p)
		require.InDelta(t, hp+kl, ce, 1e-12) // H(p,q) = H(p) + KL(p||q)

		mu1 := []float64{rng.NormFloat64(), rng.NormFloat64()}
		lv1 := []float64{rng.NormFloat64(), rng.NormFloat64()}
		mu2 := []float64{rng.NormFloat64(), rng.NormFloat64()}
		lv2 := []float64{rng.NormFloat64(), rng.NormFloat64()}
		g, err := KLDiagGaussians(mu1, lv1, mu2, lv2, 2)
		require.NoError(t, err)
		require.GreaterOrEqual(t, g, 0.0)
		g0, _ := KLDiagGaussians(mu1, lv1, mu1, lv1, 2)
		require.InDelta(t, 0, g0, 1e-15)
		k, _ := KLStdNormal(mu1, lv1, 2, nil)
		require.GreaterOrEqual(t, k, 0.0)
		// KL from N(0,I) is the two-Gaussian KL with mu2 = 0, lv2 = 0.
		k2, _ := KLDiagGaussians(mu1, lv1, []float64{0, 0}, []float64{0, 0}, 2)
		require.InDelta(t, k, k2, 1e-12)
	}
	k0, _ := KLStdNormal([]float64{0, 0}, []float64{0, 0}, 2, nil)
	require.Equal(t, 0.0, k0)
	// A case where KL(p||q) != KL(q||p).
	p, q := []float64{0.9, 0.1}, []float64{0.5, 0.5}
	a, _ := KL(p, q)
	b, _ := KL(q, p)
	require.Greater(t, math.Abs(a-b), 0.05)
	ga, _ := KLDiagGaussians([]float64{0}, []float64{0}, []float64{1}, []float64{2}, 1)
	gb, _ := KLDiagGaussians([]float64{1}, []float64{2}, []float64{0}, []float64{0}, 1)
	require.Greater(t, math.Abs(ga-gb), 0.1)
}

func TestBCEWithLogitsExtremes(t *testing.T) {
	// Finite at logits of +/-100 where the naive form overflows to Inf.
	v, err := BCEWithLogits([]float64{100, -100, 100, -100}, []float64{1, 0, 0, 1})
	require.NoError(t, err)
	require.InDelta(t, 50, v, 1e-12) // (0 + 0 + 100 + 100) / 4
}

func TestErrors(t *testing.T) {
	_, err := MSE([]float64{1}, []float64{1, 2})
	require.ErrorIs(t, err, ErrShape)
	_, err = MSE(nil, nil)
	require.ErrorIs(t, err, ErrShape)
	_, err = KL([]float64{0.5, 0.6}, []float64{0.5, 0.5})
	require.ErrorContains(t, err, "sum to")
	_, err = KLSparsity([]float64{0.1, 0.2}, 2, 1.5)
	require.Error(t, err)
	kl, err := KL([]float64{0.5, 0.5}, []float64{1, 0})
	require.NoError(t, err)
	require.True(t, math.IsInf(kl, 1))
}

// BinaryEntropy is the least binary cross-entropy over the logit, reached
// at the logit of the level itself (Gibbs' inequality), log 2 at one half
// and 0 at the ends (textbook values, from memory).
func TestBinaryEntropyIsTheCrossEntropyFloor(t *testing.T) {
	require.InDelta(t, math.Ln2, BinaryEntropy(0.5), 1e-15)
	require.Zero(t, BinaryEntropy(0))
	require.Zero(t, BinaryEntropy(1))
	for _, y := range []float64{0.01, 0.2, 0.5, 0.73, 0.999} {
		at := math.Log(y / (1 - y))
		h := BinaryEntropy(y)
		require.InDelta(t, h, BCEWithLogitsElem(at, y), 1e-12, "y=%v", y)
		for _, d := range []float64{-1, -0.1, 0.1, 1} {
			require.Greater(t, BCEWithLogitsElem(at+d, y), h, "y=%v, logit moved by %v", y, d)
		}
	}
}
