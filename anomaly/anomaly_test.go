package anomaly

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"github.com/stretchr/testify/require"
)

// auc.json: the Mann-Whitney U statistic from scipy.stats.mannwhitneyu
// (Debian python3-scipy 1.10.1) over n_pos*n_neg, written by
// testdata/anomaly/make_golden.py.
func TestROCAUCMatchesMannWhitney(t *testing.T) {
	b, err := os.ReadFile("../testdata/anomaly/auc.json")
	require.NoError(t, err)
	var f struct {
		Cases []struct {
			Name     string
			Scores   []float64
			Positive []bool
			AUC      float64
		}
	}
	require.NoError(t, json.Unmarshal(b, &f))
	require.Len(t, f.Cases, 4)
	for _, c := range f.Cases {
		got, err := ROCAUC(c.Scores, c.Positive)
		require.NoError(t, err)
		require.InDelta(t, c.AUC, got, 1e-12, c.Name)
	}
	_, err = ROCAUC([]float64{1, 2}, []bool{true, true})
	require.Error(t, err)
}

func TestPrecisionRecall(t *testing.T) {
	p, r, err := PrecisionRecall([]float64{0.1, 0.9, 0.8, 0.2, 0.95}, []bool{false, true, false, true, true}, 0.5)
	require.NoError(t, err)
	require.InDelta(t, 2.0/3, p, 1e-15) // flagged: .9 (T) .8 (F) .95 (T)
	require.InDelta(t, 2.0/3, r, 1e-15) // positives: .9 .2 .95
	p, _, _ = PrecisionRecall([]float64{0.1}, []bool{true}, 0.5)
	require.True(t, math.IsNaN(p))
}

// The quantile threshold's false-alarm rate holds on fresh data from the
// same distribution: with n = 999 calibration scores and a = 0.01, k = 990
// and the expected rate is 1 - 990/1000 = 0.01 (split-conformal
// calibration; common practice). Over 200,000 fresh draws the observed rate
// has a standard error near 0.0002 given the threshold, and the threshold
// itself varies; the test allows 0.004.
func TestQuantileFalseAlarmHolds(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	cal := make([]float64, 999)
	for i := range cal {
		cal[i] = rng.ExpFloat64()
	}
	th, err := Calibrate(cal, Config{FalseAlarm: 0.01})
	require.NoError(t, err)
	require.InDelta(t, 0.01, th.ExpectedFalseAlarm, 1e-12)
	flagged := 0
	const n = 200000
	for i := 0; i < n; i++ {
		if th.Flag(rng.ExpFloat64()) {
			flagged++
		}
	}
	require.InDelta(t, 0.01, float64(flagged)/n, 0.004)

	mx, err := Calibrate(cal, Config{Method: Max})
	require.NoError(t, err)
	require.InDelta(t, 1.0/1000, mx.ExpectedFalseAlarm, 1e-15)
	require.GreaterOrEqual(t, mx.Value, th.Value)

	_, err = Calibrate(cal[:50], Config{FalseAlarm: 0.01})
	require.ErrorContains(t, err, "needs at least 99")
	_, err = Calibrate(cal, Config{FalseAlarm: 2})
	require.ErrorIs(t, err, ErrConfig)
	_, err = Calibrate([]float64{math.NaN()}, Config{})
	require.Error(t, err)
}

func TestAssess(t *testing.T) {
	th := Threshold{Value: 1}
	s := Assess(1.5, []float64{0.1, 0.6, 0.3}, []string{"flow", "current"}, 2, th)
	require.True(t, s.Anomaly)
	require.Equal(t, 1.0, s.Threshold)
	require.Len(t, s.Top, 2)
	require.Equal(t, Feature{Column: 1, Name: "current", Share: 0.6}, s.Top[0])
	require.Equal(t, 2, s.Top[1].Column)
	require.Equal(t, "", s.Top[1].Name) // no name given for column 2
	require.InDelta(t, 0.3, s.Top[1].Share, 1e-15)
	s = Assess(1, []float64{0, 0}, nil, 5, th)
	require.False(t, s.Anomaly, "a score equal to the threshold is not flagged")
	require.Len(t, s.Top, 2)
	require.Equal(t, 0.0, s.Top[0].Share)
	// negative contributions (a full covariance's) have no share and do
	// not count in the total: shares stay in [0, 1] (common practice, no
	// source)
	s = Assess(2, []float64{-1, 3, 1}, nil, 3, th)
	require.Equal(t, []Feature{{Column: 1, Share: 0.75}, {Column: 2, Share: 0.25}, {Column: 0, Share: 0}}, s.Top)
}

// TestFalseAlarmBound checks Threshold.FalseAlarmBound, the 0.95 quantile
// of Beta(n+1-k, k), against scipy.stats.beta.ppf (Debian python3-scipy;
// values printed by
// /usr/bin/python3 -c "import scipy.stats as s; print(s.beta.ppf(0.95, n+1-k, k))").
func TestFalseAlarmBound(t *testing.T) {
	for _, c := range []struct {
		n    int
		want float64
	}{
		{70, 0.04189334406688858},    // max method: k = n
		{99, 0.029806673773350886},   // k = 99
		{500, 0.018212851796106527},  // k = 496
		{5000, 0.012417810325471835}, // k = 4951
	} {
		s := make([]float64, c.n)
		for i := range s {
			s[i] = float64(i)
		}
		m := Quantile
		if c.n < 99 {
			m = Max
		}
		th, err := Calibrate(s, Config{Method: m, FalseAlarm: 0.01})
		require.NoError(t, err)
		require.InEpsilon(t, c.want, th.FalseAlarmBound, 1e-9, "n=%d", c.n)
		require.Greater(t, th.FalseAlarmBound, th.ExpectedFalseAlarm)
	}
}
