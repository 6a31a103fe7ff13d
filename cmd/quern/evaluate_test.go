package main

import (
	"math"
	"testing"
)

// A ratio with nothing to divide by says so instead of printing NaN.
func TestRatioText(t *testing.T) {
	for _, c := range []struct {
		v    float64
		want string
	}{
		{0.25, "0.2500"},
		{math.NaN(), "undefined (no row flagged)"},
	} {
		if got := ratioText(c.v, "no row flagged"); got != c.want {
			t.Errorf("ratioText(%v) = %q, want %q", c.v, got, c.want)
		}
	}
}
