package demo_test

import (
	"context"
	"encoding/csv"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/quernlab/quern/demo"
	"github.com/quernlab/quern/model"
	"github.com/stretchr/testify/require"
)

// The payments scenario runs end to end: the identifier, time and device
// columns are left out and said so, the categories are the model's
// fields, the hold-out month's fraud is told from normal payments (ROC AUC
// of at least 0.9 on the short run: the patterns are drawn to be
// separable, seed 1 gives 0.97), and the score file names each payment.
func TestPaymentsScenario(t *testing.T) {
	dir := t.TempDir()
	var said []string
	err := demo.Run(context.Background(), demo.Config{Out: dir, Short: true, Seed: 1, Scenario: "payments", Say: func(s string) { said = append(said, s) }})
	require.NoError(t, err)
	all := strings.Join(said, "\n")
	for _, c := range []string{"payment_id", "time", "device_id"} {
		require.Contains(t, all, `column "`+c+`" left out`)
	}
	require.Contains(t, all, "merchant_category categorical (8 levels)")
	var auc float64
	for _, s := range said {
		if i := strings.Index(s, "ROC AUC "); i >= 0 {
			auc, err = strconv.ParseFloat(strings.TrimSuffix(s[i+len("ROC AUC "):], "."), 64)
			require.NoError(t, err)
		}
	}
	require.GreaterOrEqual(t, auc, 0.9)
	m, err := model.Open(filepath.Join(dir, "payments.qm"))
	require.NoError(t, err)
	require.NotNil(t, m.Schema().Encoding)
	f, err := os.Open(filepath.Join(dir, "holdout-scores.csv"))
	require.NoError(t, err)
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	require.NoError(t, err)
	require.Len(t, recs, 2001)
	require.Equal(t, "payment_id", recs[0][0])
	require.True(t, strings.HasPrefix(recs[1][0], "pay-"))
	_, err = os.Stat(filepath.Join(dir, "report", "index.html"))
	require.NoError(t, err)

	err = demo.Run(context.Background(), demo.Config{Out: dir, Scenario: "boats"})
	require.ErrorContains(t, err, `unknown scenario "boats"`)
}
