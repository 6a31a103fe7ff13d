package anomaly_test

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/stretchr/testify/require"
)

// TestFitGaussianLedoitWolf checks the shrinkage, the precision matrix and
// the distances against numpy (testdata/anomaly/make_gauss.py, on rows of
// the UCI wine data). Tolerance 1e-5 relative: the rows reach FitGaussian
// rounded to float32, as a model's codes and residuals do.
func TestFitGaussianLedoitWolf(t *testing.T) {
	raw, err := os.ReadFile("../testdata/anomaly/gauss.json")
	require.NoError(t, err)
	var g struct {
		X         [][]float64
		Shrinkage float64
		Mean      []float64
		Precision []float64
		Distance  []float64
	}
	require.NoError(t, json.Unmarshal(raw, &g))
	p := len(g.X[0])
	rows := make([][]float32, len(g.X))
	for i, r := range g.X {
		for _, v := range r {
			rows[i] = append(rows[i], float32(v))
		}
	}
	got, err := anomaly.FitGaussian(p, func(visit func([]float32)) error {
		for _, r := range rows {
			visit(r)
		}
		return nil
	})
	require.NoError(t, err)
	require.NoError(t, got.Check())
	require.InEpsilon(t, g.Shrinkage, got.Shrinkage, 1e-6)
	for j := range g.Mean {
		require.InEpsilon(t, g.Mean[j], got.Mean[j], 1e-6)
	}
	for j := range g.Precision {
		require.InDelta(t, g.Precision[j], got.Precision[j], 1e-5*math.Abs(g.Precision[j])+1e-9, "precision %d", j)
	}
	var terms, tmp []float64
	for i, r := range rows {
		var d float64
		d, terms, tmp = got.Distance(terms, tmp, r)
		require.InEpsilon(t, g.Distance[i], d, 1e-5, "row %d", i)
	}
}

// TestGaussianWide: past FullLimit columns the Gaussian keeps variances;
// for 2000 rows of independent columns of standard deviation 1..4 the
// Ledoit-Wolf weight of the diagonal form is small (the sample variances
// are well determined) and each variance lies within 15% of the truth,
// and a row's distance is the sum of its squared deviations over them
// (common practice, no source). A fourth-moment term that counted the
// off-diagonal products shrank every variance towards their mean (weight
// 0.4 to 1).
func TestGaussianWide(t *testing.T) {
	p, n := anomaly.FullLimit+3, 2000
	r := rand.New(rand.NewPCG(3, 4))
	rows := make([][]float32, n)
	for i := range rows {
		rows[i] = make([]float32, p)
		for j := range rows[i] {
			rows[i][j] = float32(r.NormFloat64() * float64(1+j%4))
		}
	}
	g, err := anomaly.FitGaussian(p, func(visit func([]float32)) error {
		for _, row := range rows {
			visit(row)
		}
		return nil
	})
	require.NoError(t, err)
	require.Nil(t, g.Precision)
	require.Len(t, g.Variance, p)
	require.Less(t, g.Shrinkage, 0.05)
	for j, v := range g.Variance {
		sd := float64(1 + j%4)
		require.InEpsilon(t, sd*sd, v, 0.15, "column %d", j)
	}
	var want float64
	for j, v := range rows[0] {
		c := float64(v) - g.Mean[j]
		want += c * c / g.Variance[j]
	}
	d, _, _ := g.Distance(nil, nil, rows[0])
	require.InEpsilon(t, want, d, 1e-12)
}

func TestFitGaussianRefuses(t *testing.T) {
	_, err := anomaly.FitGaussian(2, func(visit func([]float32)) error {
		visit([]float32{1, 2})
		return nil
	})
	require.ErrorContains(t, err, "at least 2 rows")
	_, err = anomaly.FitGaussian(0, nil)
	require.Error(t, err)
	// a constant column stays invertible
	g, err := anomaly.FitGaussian(2, func(visit func([]float32)) error {
		for i := range 10 {
			visit([]float32{float32(i), 5})
		}
		return nil
	})
	require.NoError(t, err)
	d, _, _ := g.Distance(nil, nil, []float32{4.5, 6})
	require.False(t, math.IsInf(d, 0) || math.IsNaN(d))
	d0, _, _ := g.Distance(nil, nil, []float32{4.5, 5})
	require.Greater(t, d, d0, "a deviation in the constant column counts")
}
