package fleet

import (
	"testing"

	"github.com/stretchr/testify/require"
)

func TestFleetIsSeededAndLabelled(t *testing.T) {
	a := Generate(Config{Pumps: 6, HistoryDays: 2, HoldoutDays: 4, Seed: 1})
	b := Generate(Config{Pumps: 6, HistoryDays: 2, HoldoutDays: 4, Seed: 1})
	require.Equal(t, a, b)
	require.Len(t, a.History, 6*48)
	require.Len(t, a.Holdout, 6*96)
	for _, r := range a.History {
		require.Equal(t, Healthy, r.Fault, "faults only in the hold-out week")
	}
	faults := 0
	for _, r := range a.Holdout {
		if r.Fault != Healthy {
			faults++
		}
	}
	require.Greater(t, faults, 0)
	d := Dataset(a.Holdout)
	require.Equal(t, 6, d.Cols)
	n := 0
	for _, l := range d.Labels {
		n += l
	}
	require.Equal(t, faults, n)
}
