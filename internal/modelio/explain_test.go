package modelio

import (
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/stretchr/testify/require"
)

// Worked by hand: a number within and beyond its training range, a
// boolean and a category against their reconstructions, a missing cell.
func TestExplain(t *testing.T) {
	enc := &data.Encoding{Fields: []data.Field{
		{Name: "amount", Type: data.Numeric, Min: 1, Max: 100, Indicator: true},
		{Name: "card", Type: data.Boolean, True: "yes", False: "no"},
		{Name: "channel", Type: data.Categorical, Levels: []string{"phone", "shop", "web"}},
		{Name: "items", Type: data.Integer, Min: 1, Max: 5},
	}}
	f := &data.Fitted{Encoding: enc, Columns: enc.Columns()}
	cols := enc.Width() // amount, amount (missing), card, 3 levels, items
	x := []float32{
		900, 0, 1, 0, 1, 0, 2, // 900 at a shop, card present
		22, 1, 0, 1, 0, 0, 3, // amount missing (filled with 22), by phone
	}
	recon := []float32{
		640, 0, 0.2, 0.1, 0.3, 0.6, 2.6,
		30, 0.9, 0.7, 0.8, 0.1, 0.1, 2.4,
	}
	all := []anomaly.Feature{{Column: 0}, {Column: 1}, {Column: 2}, {Column: 3}}
	scores := []anomaly.Score{{Top: append([]anomaly.Feature(nil), all...)}, {Top: append([]anomaly.Feature(nil), all...)}}
	Explain(f, scores, x, recon, cols)
	require.Equal(t, []anomaly.Feature{
		{Column: 0, Expected: "100", Direction: "above"}, // 640 clamped to the training maximum
		{Column: 1, Expected: "no", Direction: "other"},
		{Column: 2, Expected: "web", Direction: "other"},
		{Column: 3, Expected: "3", Direction: "below"}, // 2.6 rounded
	}, scores[0].Top)
	require.Equal(t, []anomaly.Feature{
		{Column: 0, Expected: "30", Direction: "missing"},
		{Column: 1, Expected: "yes", Direction: "other"},
		{Column: 2, Expected: "phone"},
		{Column: 3, Expected: "2", Direction: "above"},
	}, scores[1].Top)

	// without an encoding a feature is an input: its reconstruction
	plain := &data.Fitted{}
	s := []anomaly.Score{{Top: []anomaly.Feature{{Column: 1}}}}
	Explain(plain, s, []float32{1, 2}, []float32{1, 2.5}, 2)
	require.Equal(t, anomaly.Feature{Column: 1, Expected: "2.5", Direction: "below"}, s[0].Top[0])
}
