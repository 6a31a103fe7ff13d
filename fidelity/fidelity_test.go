package fidelity

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strings"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/stretchr/testify/require"
)

type golden struct {
	KS []struct {
		Name   string    `json:"name"`
		A      []float64 `json:"a"`
		B      []float64 `json:"b"`
		Value  float64   `json:"ks"`
		Source string    `json:"source"`
	} `json:"ks"`
	Correlation []struct {
		Name   string    `json:"name"`
		A      []float64 `json:"a"`
		B      []float64 `json:"b"`
		Value  float64   `json:"r"`
		Source string    `json:"source"`
	} `json:"correlation"`
}

func loadGolden(t *testing.T) golden {
	b, err := os.ReadFile("../testdata/fidelity/golden.json")
	require.NoError(t, err)
	var g golden
	require.NoError(t, json.Unmarshal(b, &g))
	return g
}

// KS and Correlation against scipy.stats.ks_2samp and numpy.corrcoef
// (testdata/fidelity/make_golden.py); both compute in float64, so 1e-12.
func TestGolden(t *testing.T) {
	g := loadGolden(t)
	require.NotEmpty(t, g.KS)
	for _, c := range g.KS {
		require.InDelta(t, c.Value, KS(c.A, c.B), 1e-12, "%s vs %s", c.Name, c.Source)
		require.InDelta(t, c.Value, KS(c.B, c.A), 1e-12, "%s, symmetric", c.Name)
	}
	require.NotEmpty(t, g.Correlation)
	for _, c := range g.Correlation {
		require.InDelta(t, c.Value, Correlation(c.A, c.B), 1e-12, "%s vs %s", c.Name, c.Source)
	}
}

// TV by its definition, worked by hand: shares {a: .5, b: .5} against
// {a: .25, b: .25, c: .5} differ by .25 + .25 + .5, halved.
func TestTV(t *testing.T) {
	require.InDelta(t, 0.5, TV([]float64{0, 1, 0, 1}, []float64{0, 1, 2, 2}), 1e-15)
	require.Zero(t, TV([]float64{3, 1}, []float64{1, 3}))
	require.InDelta(t, 1, TV([]float64{0}, []float64{1}), 1e-15)
}

// tableOf reads an invented table of n rows: a number y that follows a
// number x and a category whose level follows the sign of x; seed
// draws it. copyOf, when not nil, repeats its rows instead.
func tableOf(t *testing.T, n int, seed uint64, enc *data.Encoding) *data.Dataset {
	r := rand.New(rand.NewPCG(seed, 1))
	var b strings.Builder
	b.WriteString("x,y,kind\n")
	for range n {
		x := r.NormFloat64()
		k := "neg"
		if x > 0 {
			k = "pos"
		}
		if r.Float64() < 0.1 {
			k = "odd"
		}
		fmt.Fprintf(&b, "%.4f,%.4f,%s\n", x, 2*x+0.3*r.NormFloat64(), k)
	}
	d, err := data.ReadCSV(strings.NewReader(b.String()), "t.csv", data.CSVConfig{Typed: enc == nil, Encoding: enc})
	require.NoError(t, err)
	return d
}

// Rows drawn like the real ones fit well on every figure and sit as far
// from the training rows as held-out rows do (about 5% nearer than their
// 5% quantile); the baseline fits each column as well and loses the
// correlations; copies of training rows are counted as such.
func TestCompare(t *testing.T) {
	train := tableOf(t, 2000, 1, nil)
	enc := train.Encoding
	hold, like := tableOf(t, 1000, 2, enc), tableOf(t, 1000, 3, enc)
	r, err := Compare(train, hold, like, enc, 1)
	require.NoError(t, err)
	require.Equal(t, []string{"x", "y", "kind"}, []string{r.Synthetic.Columns[0].Name, r.Synthetic.Columns[1].Name, r.Synthetic.Columns[2].Name})
	require.Equal(t, "TV", r.Synthetic.Columns[2].Statistic)
	for i, c := range r.Synthetic.Columns {
		// two samples of 1000 from one distribution: the KS statistic's
		// 99.9% point is about 1.95 sqrt(2/1000) = 0.087 (Smirnov's
		// asymptotic distribution); TV of three levels is smaller still
		require.Less(t, c.Value, 0.087, c.Name)
		require.Less(t, r.Baseline.Columns[i].Value, 0.087, "baseline "+c.Name)
	}
	require.Less(t, r.Synthetic.CorrelationGap, 0.05)
	require.Greater(t, r.Baseline.CorrelationGap, 0.3, "independent columns lose x ~ y ~ kind")
	// the Fréchet distance of like rows is sampling noise; the
	// baseline's carries the lost covariances
	require.Less(t, r.Synthetic.Frechet, 0.1)
	require.Greater(t, r.Baseline.Frechet, 1.0)
	// the share nearer than held-out rows' 5% quantile: binomial(1000,
	// 0.05), 4.5 standard deviations either side
	require.InDelta(t, 0.05, r.Synthetic.Nearest.Closer, 0.031)
	require.Zero(t, r.Synthetic.Nearest.Copies)

	copies := train.Subset(seq(500))
	r, err = Compare(train, hold, copies, enc, 1)
	require.NoError(t, err)
	require.Equal(t, 500, r.Synthetic.Nearest.Copies)
	require.Equal(t, 1.0, r.Synthetic.Nearest.Closer)
	require.Zero(t, r.Synthetic.Nearest.Median)

	_, err = Compare(train, hold, copies, &data.Encoding{Fields: enc.Fields[:1]}, 1)
	require.ErrorIs(t, err, ErrInput)
	require.True(t, math.IsNaN(quantile(nil, 0.5)))
}

func seq(n int) []int {
	out := make([]int, n)
	for i := range out {
		out[i] = i
	}
	return out
}
