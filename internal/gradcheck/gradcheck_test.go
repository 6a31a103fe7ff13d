package gradcheck

import (
	"math"
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
)

func TestCheckAcceptsCorrectAndRejectsWrong(t *testing.T) {
	p := layers.NewParam("w", 1, 3, layers.Float64)
	copy(p.F64(), []float64{0.3, -1.2, 2})
	build := func(g *engine.Graph) *engine.Node { return g.Sum(g.Mul(g.Exp(g.Param(p)), g.Param(p))) }
	// f(w) = sum w exp(w), written independently.
	ref := func() float64 {
		var s float64
		for _, w := range p.F64() {
			s += w * math.Exp(w)
		}
		return s
	}
	res, err := Check([]*layers.Param{p}, build, ref, 1e-4)
	require.NoError(t, err)
	require.Less(t, res.MaxRelErr, 1e-9, res.String())
	// A reference that differs by 1% in one coordinate must be caught.
	wrong := func() float64 { return ref() + 0.01*p.F64()[1]*math.Exp(p.F64()[1]) }
	res, err = Check([]*layers.Param{p}, build, wrong, 1e-4)
	require.NoError(t, err)
	require.Greater(t, res.MaxRelErr, 1e-3)
	require.Equal(t, 1, res.Index)
}

func TestCheckRejectsFloat32(t *testing.T) {
	p := layers.NewParam("w", 1, 1, layers.Float32)
	_, err := Check([]*layers.Param{p}, func(g *engine.Graph) *engine.Node { return g.Sum(g.Param(p)) }, nil, 1e-4)
	require.Error(t, err)
}
