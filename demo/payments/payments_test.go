package payments

import (
	"bytes"
	"encoding/csv"
	"math"
	"testing"

	"github.com/stretchr/testify/require"
)

// Normal payments keep the scenario's rules, which the fraud patterns
// break; the same seed gives the same table.
func TestGenerate(t *testing.T) {
	tb := Generate(Config{History: 3000, Holdout: 3000, FraudShare: 0.1, Seed: 5})
	require.Len(t, tb.History, 3000)
	require.Len(t, tb.Holdout, 3000)
	byPattern := map[string]int{}
	for _, p := range append(append([]Payment(nil), tb.History...), tb.Holdout...) {
		byPattern[p.Pattern]++
		if p.Pattern != Normal {
			continue
		}
		require.Equal(t, p.Channel == "online", p.CardPresent == "no", "%+v", p)
		if p.Channel == "contactless" && !math.IsNaN(p.Amount) {
			require.LessOrEqual(t, p.Amount, float64(ContactlessLimit))
		}
		require.NotContains(t, far, p.Country)
		require.Equal(t, p.Channel == "online", p.Device != "", "%+v", p)
	}
	for _, pt := range Patterns {
		// 3000 x 0.1 / 4 = 75 expected each; 4 standard deviations
		require.InDelta(t, 75, byPattern[pt], 35, pt)
	}
	for _, p := range tb.History {
		require.Equal(t, Normal, p.Pattern)
	}
	again := Generate(Config{History: 3000, Holdout: 3000, FraudShare: 0.1, Seed: 5})
	require.Equal(t, len(tb.Holdout), len(again.Holdout))
	for i := range tb.Holdout {
		a, b := tb.Holdout[i], again.Holdout[i]
		require.True(t, a.ID == b.ID && a.Pattern == b.Pattern && (a.Amount == b.Amount || math.IsNaN(a.Amount) && math.IsNaN(b.Amount)))
	}
	var buf bytes.Buffer
	require.NoError(t, Write(&buf, tb.Holdout, true))
	recs, err := csv.NewReader(&buf).ReadAll()
	require.NoError(t, err)
	require.Len(t, recs, 3001)
	require.Equal(t, append(append([]string(nil), Columns...), Label), recs[0])
}
