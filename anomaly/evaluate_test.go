package anomaly

import (
	"math"
	"testing"

	"github.com/stretchr/testify/require"
)

// A worked example, by hand (from memory: the step-wise average precision
// sum_n (R_n - R_{n-1}) P_n, and the confusion counts' usual ratios).
// Scores 0.9 (anomalous), 0.8 (normal), 0.7 (anomalous), 0.6 (normal),
// 0.5 (anomalous): recall rises to 1/3 at precision 1, to 2/3 at 2/3, to
// 1 at 3/5; AP = 1/3*1 + 1/3*2/3 + 1/3*3/5 = 0.7556.
func TestCurvesAndCounts(t *testing.T) {
	scores := []float64{0.9, 0.8, 0.7, 0.6, 0.5}
	pos := []bool{true, false, true, false, true}
	roc, pr, ap, err := Curves(scores, pos)
	require.NoError(t, err)
	require.InDelta(t, (1.0+2.0/3+3.0/5)/3, ap, 1e-12)
	require.Len(t, pr, 5)
	require.Equal(t, Point{X: 1.0 / 3, Y: 1, Threshold: 0.8}, pr[0])
	require.Equal(t, Point{X: 0, Y: 0, Threshold: 0.9}, roc[0])
	require.Equal(t, Point{X: 1, Y: 1, Threshold: 0.5}, roc[len(roc)-1])
	// the ROC curve's trapezoids give ROCAUC's figure
	var area float64
	for i := 1; i < len(roc); i++ {
		area += (roc[i].X - roc[i-1].X) * (roc[i].Y + roc[i-1].Y) / 2
	}
	auc, err := ROCAUC(scores, pos)
	require.NoError(t, err)
	require.InDelta(t, auc, area, 1e-12)
	c, err := CountsAt(scores, pos, 0.65)
	require.NoError(t, err)
	require.Equal(t, Counts{TP: 2, FP: 1, TN: 1, FN: 1}, c)
	require.InDelta(t, 2.0/3, c.Precision(), 1e-12)
	require.InDelta(t, 2.0/3, c.Recall(), 1e-12)
	require.InDelta(t, 2.0/3, c.F1(), 1e-12)
	require.InDelta(t, 0.5, c.FalseAlarmRate(), 1e-12)
	require.True(t, math.IsNaN(Counts{}.Precision()))
	// ties share a step
	roc, pr, _, err = Curves([]float64{1, 1, 0}, []bool{true, false, false})
	require.NoError(t, err)
	require.Len(t, pr, 2)
	require.Equal(t, Point{X: 0.5, Y: 1, Threshold: 0}, roc[1])
	_, _, _, err = Curves([]float64{1, 2}, []bool{true, true})
	require.Error(t, err)
}
