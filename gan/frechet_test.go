package gan

import (
	"encoding/json"
	"math/rand/v2"
	"os"
	"testing"

	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/mat"
)

func gaussian(mu []float64, cov [][]float64) Gaussian {
	n := len(mu)
	s := mat.NewSymDense(n, nil)
	for i := range cov {
		for j := i; j < n; j++ {
			s.SetSym(i, j, cov[i][j])
		}
	}
	return Gaussian{Mean: mu, Cov: s}
}

// frechet.json: scipy.linalg.sqrtm (Debian python3-scipy 1.10.1), written
// by testdata/gan/make_golden.py. The diagonal case is also checkable by
// hand: 2 + (1+4+9+1) - 2(3+2) = 7.
func TestFrechetGolden(t *testing.T) {
	b, err := os.ReadFile("../testdata/gan/frechet.json")
	require.NoError(t, err)
	var f struct {
		Cases []struct {
			Name       string
			Mu1, Mu2   []float64
			Cov1, Cov2 [][]float64
			FD         float64
		}
	}
	require.NoError(t, json.Unmarshal(b, &f))
	require.Len(t, f.Cases, 3)
	for _, c := range f.Cases {
		a, b := gaussian(c.Mu1, c.Cov1), gaussian(c.Mu2, c.Cov2)
		got, err := FrechetDistance(a, b)
		require.NoError(t, err)
		require.InDelta(t, c.FD, got, 1e-9*(1+c.FD), c.Name)
		back, err := FrechetDistance(b, a)
		require.NoError(t, err)
		require.InDelta(t, got, back, 1e-9*(1+got), "symmetric")
		self, err := FrechetDistance(a, a)
		require.NoError(t, err)
		require.InDelta(t, 0, self, 1e-9)
	}
}

func TestFrechetRows(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	n := 20000
	x := make([]float32, 2*n)
	y := make([]float32, 2*n)
	for i := 0; i < n; i++ {
		x[2*i], x[2*i+1] = float32(rng.NormFloat64()), float32(rng.NormFloat64())
		y[2*i], y[2*i+1] = float32(1+2*rng.NormFloat64()), float32(rng.NormFloat64())
	}
	// N(0,I) vs N((1,0), diag(4,1)): 1 + (1+4) - 2*2 + (1+1) - 2*1 = 1+1 = 2.
	d, err := FrechetRows(x, n, y, n, 2)
	require.NoError(t, err)
	require.InDelta(t, 2, d, 0.1)
	_, err = FrechetRows(x[:2], 1, y, n, 2)
	require.Error(t, err)
}
