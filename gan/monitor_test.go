package gan

import (
	"context"
	"testing"

	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

// A generator that cannot learn (a vanishing rate) against a quick
// discriminator: the discriminator wins and the generator's constant output
// has no spread, so both warnings fire; the sample callback runs on
// schedule.
func TestWarningsAndSamples(t *testing.T) {
	d := ring(1024, 2)
	var got []Warning
	var snaps []int
	m, err := New(Config{Outputs: 2, Noise: 2, GenHidden: []int{4}, DiscHidden: []int{32}, GenRate: 1e-12, DiscRate: 1e-2,
		Monitor: Monitor{WinningSteps: 50, OnWarning: func(w Warning) { got = append(got, w) },
			SampleEvery: 40, SampleRows: 5, OnSamples: func(step int, rows []float32) {
				require.Len(t, rows, 10)
				snaps = append(snaps, step)
			}}, Seed: 1})
	require.NoError(t, err)
	// squash the generator's output to a point
	last := m.Generator.Layers[len(m.Generator.Layers)-1]
	for i := 0; i < last.W.Len(); i++ {
		last.W.SetAt(i, 0)
	}
	_, err = m.Train(context.Background(), d, nil, train.Config{Epochs: 8, BatchSize: 64})
	require.NoError(t, err)
	kinds := map[string]bool{}
	for _, w := range got {
		kinds[w.Kind] = true
	}
	require.True(t, kinds["discriminator_wins"], "%v", got)
	require.True(t, kinds["collapse"], "%v", got)
	require.Equal(t, []int{40, 80, 120}, snaps)
	require.Equal(t, got, m.Warnings())
}

func TestOtherObjectivesTrain(t *testing.T) {
	d := ring(512, 4)
	for _, cfg := range []Config{
		{Outputs: 2, Loss: Minimax, LabelSmoothing: 0.1, GenHidden: []int{8}, DiscHidden: []int{8}, Seed: 1},
		{Outputs: 2, Critic: Wasserstein, DiscSteps: 3, GenHidden: []int{8}, DiscHidden: []int{8}, Seed: 1},
	} {
		m, err := New(cfg)
		require.NoError(t, err)
		h, err := m.Train(context.Background(), d, d, train.Config{Epochs: 2})
		require.NoError(t, err)
		require.Equal(t, "d_loss", h.Epochs[0].Train[0].Name)
		require.Equal(t, "d_loss", h.Epochs[0].Validation[0].Name)
	}
	_, err := New(Config{Outputs: 2, LabelSmoothing: 0.7})
	require.ErrorIs(t, err, ErrConfig)
	m, _ := New(Config{Outputs: 2, Pack: 4})
	_, err = m.Train(context.Background(), d, nil, train.Config{BatchSize: 30})
	require.ErrorContains(t, err, "multiple of Pack")
	c, _ := New(Config{Outputs: 2, Classes: 3})
	_, err = c.Train(context.Background(), d, nil, train.Config{})
	require.ErrorContains(t, err, "label")
}

func TestGenerateIntoAllocatesNothing(t *testing.T) {
	m, err := New(Config{Outputs: 3, Noise: 4, GenHidden: []int{8}, Classes: 2, Seed: 1})
	require.NoError(t, err)
	dst := make([]float32, 30)
	_, err = m.GenerateInto(dst, 10, 1, -1)
	require.NoError(t, err)
	if !raceBuild { // the race detector's instrumentation allocates
		require.Zero(t, testing.AllocsPerRun(50, func() { _, _ = m.GenerateInto(dst, 10, 1, 1) }))
	}
	a, _ := m.Generate(10, 5, 1)
	b, _ := m.GenerateInto(nil, 10, 5, 1)
	require.Equal(t, a, b)
}
