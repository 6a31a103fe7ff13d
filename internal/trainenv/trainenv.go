package trainenv

import (
	"context"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

// Fit trains m on tr (validation rows va may be nil) with s and returns
// the history, failing the test on any error.
func Fit(t testing.TB, m train.Model, tr, va *data.Dataset, s train.Settings) *train.History {
	t.Helper()
	tt, err := train.New(m, s)
	require.NoError(t, err)
	h, err := tt.Run(context.Background(), tr, va)
	require.NoError(t, err)
	tt.Release()
	return h
}
