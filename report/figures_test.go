package report

import (
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

// Points spread along a direction at angle theta with a little noise
// across it: the first principal component is that direction, and its
// share of the variance is var_along / (var_along + var_across) (the
// eigen-decomposition of a 2x2 covariance; from memory).
func TestProjectFindsThePrincipalDirection(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	theta := 0.6
	n := 4000
	x := make([]float32, 0, 2*n)
	for i := 0; i < n; i++ {
		a, c := 3*rng.NormFloat64(), 0.5*rng.NormFloat64()
		x = append(x, float32(a*math.Cos(theta)-c*math.Sin(theta)), float32(a*math.Sin(theta)+c*math.Cos(theta)))
	}
	p, share, err := Project(x, n, 2)
	require.NoError(t, err)
	require.InDelta(t, 9/(9+0.25), share[0], 0.01)
	// the first coordinate is the projection on (cos, sin), up to sign
	var dot, norm float64
	for i := 0; i < n; i++ {
		along := float64(x[2*i])*math.Cos(theta) + float64(x[2*i+1])*math.Sin(theta)
		dot += along * p[2*i]
		norm += along * along
	}
	require.InDelta(t, 1, math.Abs(dot/norm), 0.02)
	_, _, err = Project(x[:3], 1, 3)
	require.Error(t, err)
}

func TestLogWorthyAndTicks(t *testing.T) {
	require.True(t, logWorthy([]float64{250, 3}))
	require.False(t, logWorthy([]float64{250, 30}))
	require.False(t, logWorthy([]float64{250, 0.1, -1}), "a non-positive value rules a log axis out")
	var got []string
	for _, tk := range (integerTicks{}).Ticks(0.5, 7.5) {
		got = append(got, tk.Label)
	}
	require.Equal(t, []string{"1", "2", "3", "4", "5", "6", "7"}, got, "whole epochs only")
	got = nil
	for _, tk := range (integerTicks{}).Ticks(0.5, 100.5) {
		got = append(got, tk.Label)
	}
	require.Equal(t, []string{"20", "40", "60", "80", "100"}, got)
	seen := map[string]bool{}
	for _, tk := range (readableTicks{}).Ticks(1.0, 1.13) {
		if tk.Label != "" {
			require.False(t, seen[tk.Label], "labels tell ticks apart: %q twice", tk.Label)
			seen[tk.Label] = true
		}
	}
}

// A VAE-like history with a loss near 250, a KL near 17 and a constant
// beta: the figure has the loss and KL on panels of their own and
// leaves beta out; a GAN-like one draws no best epoch.
func TestCurvesAndMapsDraw(t *testing.T) {
	dir := t.TempDir()
	h := &train.History{BestEpoch: 3, BestLoss: 240}
	for e := 0; e < 5; e++ {
		v := 250 - float64(e)
		h.Epochs = append(h.Epochs, train.EpochRecord{
			Train:      []train.Metric{{Name: "loss", Value: v}, {Name: "reconstruction", Value: v - 17}, {Name: "kl", Value: 17}, {Name: "beta", Value: 1}},
			Validation: []train.Metric{{Name: "loss", Value: v + 1}},
		})
	}
	h.Epochs[4].Train[2].Value = 18
	require.NoError(t, LossCurves(filepath.Join(dir, "c.png"), h, CurveOptions{Extra: []Series{{Name: "fd", Y: []float64{math.NaN(), 3, 2, 1, 0.5}}}}))
	w, hh := decode(t, filepath.Join(dir, "c.png"))
	require.Equal(t, 960, w)
	row := panelHeight.Points() * 96 / 72 // pixels a row of panels
	require.InDelta(t, 2*row, float64(hh), 1, "loss, reconstruction, kl and the extra series: two rows of two")
	codes := make([]float32, 0, 300*5)
	rng := rand.New(rand.NewPCG(3, 4))
	labels := make([]int, 300)
	for i := 0; i < 300; i++ {
		labels[i] = i % 10
		for j := 0; j < 5; j++ {
			codes = append(codes, float32(rng.NormFloat64()))
		}
	}
	require.NoError(t, LatentMap(filepath.Join(dir, "l.png"), codes, 300, 5, labels, nil))
	_, hh = decode(t, filepath.Join(dir, "l.png"))
	require.InDelta(t, 3*row, float64(hh), 1, "the projection, then six pairs three a row")
	require.NoError(t, RowMap(filepath.Join(dir, "r.png"), codes[:300*2], 300, 2, nil, nil, []string{"amount", "hour"}))
	require.NoError(t, ScoreHistogram(filepath.Join(dir, "s.png"), []float64{-3, -1, 2}, 50, nil, "negative ELBO"), "negative scores and a threshold past the data")
}

func TestPageHoldsTablesAndMeta(t *testing.T) {
	dir := t.TempDir()
	pg := Page{Title: "r", Generated: "2026-12-02 10:00 UTC", Version: "v1.2.3", RunTime: "4.2s",
		Summary: []Setting{{Name: "threshold", Value: "0.15"}},
		Tables:  []Table{{Caption: "by fault", Header: []string{"fault", "flagged"}, Rows: [][]string{{"<b>", "3"}}}}}
	require.NoError(t, pg.Write(dir))
	b, err := os.ReadFile(filepath.Join(dir, "index.html"))
	require.NoError(t, err)
	s := string(b)
	for _, want := range []string{"Written 2026-12-02 10:00 UTC by quern v1.2.3; the run took 4.2s.", "<caption>by fault</caption>", "<td>&lt;b&gt;</td>", "<h2>Results</h2>", `rel="icon"`} {
		require.True(t, strings.Contains(s, want), "page lacks %q", want)
	}
}
