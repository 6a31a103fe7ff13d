package data

import (
	"encoding/json"
	"os"
	"testing"

	"github.com/stretchr/testify/require"
)

// TestSpectrumBreastCancer checks the eigenvalues against numpy's eigvalsh
// (testdata/sklearn/make_spectrum.py); tolerance 1e-8 of the largest
// eigenvalue (the same float32 values, sums in another order).
func TestSpectrumBreastCancer(t *testing.T) {
	bc, err := LoadCSV("../testdata/sklearn/breast_cancer.csv", CSVConfig{NoHeader: true, SkipLines: 1, Label: "c30"})
	require.NoError(t, err)
	raw, err := os.ReadFile("../testdata/sklearn/spectrum.json")
	require.NoError(t, err)
	var want map[string]any
	require.NoError(t, json.Unmarshal(raw, &want))
	for _, kind := range []ScaleKind{ScaleStandard, ScaleNone} {
		got, err := Spectrum(bc, kind)
		require.NoError(t, err)
		w := want[string(kind)].([]any)
		require.Len(t, got, len(w))
		top := w[0].(float64)
		for i, v := range w {
			require.InDelta(t, v.(float64), got[i], 1e-8*top, "%s eigenvalue %d", kind, i)
		}
	}
	ev, err := Spectrum(bc, ScaleStandard)
	require.NoError(t, err)
	// numpy: 10 components explain 95.2%, 7 explain 91.0%, 6 explain 88.8%
	require.Equal(t, 7, ComponentsFor(ev, 0.9))
	require.Equal(t, 10, ComponentsFor(ev, 0.95))
}

func TestComponentsFor(t *testing.T) {
	for _, c := range []struct {
		ev   []float64
		frac float64
		want int
	}{
		{[]float64{3, 1}, 0.75, 1}, // exactly the fraction
		{[]float64{3, 1}, 0.76, 2},
		{[]float64{0, 0}, 0.9, 0},
		{[]float64{5}, 0.9, 1},
	} {
		require.Equal(t, c.want, ComponentsFor(c.ev, c.frac), "%v %v", c.ev, c.frac)
	}
	_, err := Spectrum(&Dataset{Rows: 1, Cols: 2, X: []float32{1, 2}}, ScaleStandard)
	require.ErrorContains(t, err, "at least 2 rows")
}
