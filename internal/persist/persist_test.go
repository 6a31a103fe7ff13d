package persist

import (
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/optim"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

func TestTrainingStateRoundTrip(t *testing.T) {
	p := layers.NewParam("w", 2, 3, layers.Float32)
	o, err := optim.NewAdam(optim.AdamConfig{Rate: 0.1})
	require.NoError(t, err)
	for i := range p.Grad32() {
		p.Grad32()[i] = float32(i)
	}
	require.NoError(t, o.Update([]*layers.Param{p}))
	noise, shuffle := rand.NewPCG(1, 2), rand.NewPCG(3, 4)
	rand.New(noise).Uint64()
	h := &train.History{BestEpoch: 1}
	ts, r, err := SaveTraining(o, "opt/", noise, shuffle, h)
	require.NoError(t, err)
	f, err := Encode("ae", r, append(Params([]*layers.Param{p}), ts...))
	require.NoError(t, err)
	var back Resume
	require.NoError(t, Decode(f, "ae", &back))
	o2, _ := optim.NewAdam(optim.AdamConfig{Rate: 0.1})
	n2, s2 := rand.NewPCG(0, 0), rand.NewPCG(0, 0)
	h2, err := LoadTraining(f, &back, o2, "opt/", n2, s2)
	require.NoError(t, err)
	require.Equal(t, 1, h2.BestEpoch)
	require.Equal(t, rand.New(noise).Uint64(), rand.New(n2).Uint64())
	require.Equal(t, o.Export(), o2.Export())
	q := layers.NewParam("w", 2, 3, layers.Float32)
	require.NoError(t, SetParams(f, []*layers.Param{q}))
	require.Equal(t, p.F32(), q.F32())
	require.NoError(t, CheckNoExtra(f, []*layers.Param{q}, "opt/"))
	require.Error(t, CheckNoExtra(f, []*layers.Param{q}))
	require.Error(t, SetParams(f, []*layers.Param{layers.NewParam("w", 3, 2, layers.Float32)}))
	require.Error(t, SetParams(f, []*layers.Param{layers.NewParam("w", 2, 3, layers.Float64)}))
	require.Error(t, Decode(f, "vae", &back))
	bad := &modelfile.File{Tensors: []modelfile.Tensor{{Name: "opt/w#9", Rows: 1, Cols: 6, F64: make([]float64, 6)}}}
	require.Error(t, SetOptimizer(o2, bad, "opt/", OptimState{Kind: "adam", Slots: 2}))
}
