package train

import (
	"context"
	"math"
	"testing"

	"github.com/quernlab/quern/gan"
	"github.com/stretchr/testify/require"
)

// A generator that cannot learn (a vanishing rate) against a quick
// discriminator: the discriminator wins and the generator's constant output
// has no spread, so both warnings fire, through the callback and into the
// history; the model samples from the step callback (common practice, no
// source for the thresholds).
func TestWarningsAndSamples(t *testing.T) {
	d := ring(1024, 2)
	var got []Warning
	var snaps []int
	m, err := gan.New(gan.Config{Outputs: 2, Noise: 2, GenHidden: []int{4}, DiscHidden: []int{32}, Seed: 1})
	require.NoError(t, err)
	// squash the generator's output to a point
	last := m.Generator.Layers[len(m.Generator.Layers)-1]
	for i := 0; i < last.W.Len(); i++ {
		last.W.SetAt(i, 0)
	}
	steps := 0
	h := fit(t, m, d, nil, Settings{Epochs: 8, BatchSize: 64, Optimizer: Optimizer{Rate: 1e-12},
		Objective: Adversarial{DiscriminatorRate: 1e-2, WinningSteps: 50},
		Callbacks: Callbacks{OnWarning: func(w Warning) { got = append(got, w) }, OnStep: func(Progress) {
			if steps++; steps%40 == 0 {
				rows, err := m.Generate(5, uint64(steps), -1)
				require.NoError(t, err)
				require.Len(t, rows, 10)
				snaps = append(snaps, steps)
			}
		}}})
	kinds := map[string]bool{}
	for _, w := range got {
		kinds[w.Kind] = true
	}
	require.True(t, kinds["discriminator_wins"], "%v", got)
	require.True(t, kinds["collapse"], "%v", got)
	require.Equal(t, []int{40, 80, 120}, snaps)
	require.Equal(t, got, h.Warnings)
}

// The other objectives train and report the discriminator's figures;
// settings that do not fit the model are refused up front.
func TestOtherObjectivesTrain(t *testing.T) {
	d := ring(512, 4)
	for _, c := range []struct {
		cfg gan.Config
		obj Adversarial
	}{
		{gan.Config{Outputs: 2, GenHidden: []int{8}, DiscHidden: []int{8}, Seed: 1}, Adversarial{Loss: Minimax, LabelSmoothing: 0.1}},
		{gan.Config{Outputs: 2, Critic: gan.Wasserstein, GenHidden: []int{8}, DiscHidden: []int{8}, Seed: 1}, Adversarial{DiscSteps: 3}},
	} {
		m, err := gan.New(c.cfg)
		require.NoError(t, err)
		h := fit(t, m, d, d, Settings{Epochs: 2, Objective: c.obj})
		require.Equal(t, "d_loss", h.Epochs[0].Train[0].Name)
		require.Equal(t, "d_loss", h.Epochs[0].Validation[0].Name)
		// validation's d_real is the discriminator's mean output on the
		// validation rows, as the graph-free pass gives it: a probability
		// for BCE, the raw score for the Wasserstein critic (tolerance
		// for float32 sums in another order)
		out, err := m.Discriminate(d.X, d.Rows, nil)
		require.NoError(t, err)
		var want float64
		for _, v := range out {
			want += v
		}
		want /= float64(len(out))
		last := h.Epochs[len(h.Epochs)-1].Validation
		require.Equal(t, "d_real", last[1].Name)
		require.InDelta(t, want, last[1].Value, 1e-4*max(1, math.Abs(want)), "%v", c.cfg.Critic)
	}
	m, _ := gan.New(gan.Config{Outputs: 2, Pack: 4})
	_, err := New(m, Settings{Objective: Adversarial{LabelSmoothing: 0.7}})
	require.ErrorIs(t, err, ErrConfig)
	_, err = New(m, Settings{BatchSize: 30})
	require.ErrorContains(t, err, "multiple of the pack size")
	c, _ := gan.New(gan.Config{Outputs: 2, Classes: 3})
	tr, err := New(c, Settings{})
	require.NoError(t, err)
	_, err = tr.Run(context.Background(), d, nil)
	require.ErrorContains(t, err, "label")
}

// A resumed run raises the warnings the straight run raises: the spacing
// between warnings of one kind carries over the checkpoint.
func TestWarningsSurviveResume(t *testing.T) {
	d := ring(1024, 2)
	build := func() *gan.Model {
		m, err := gan.New(gan.Config{Outputs: 2, Noise: 2, GenHidden: []int{4}, DiscHidden: []int{32}, Seed: 1})
		require.NoError(t, err)
		last := m.Generator.Layers[len(m.Generator.Layers)-1]
		for i := 0; i < last.W.Len(); i++ {
			last.W.SetAt(i, 0)
		}
		return m
	}
	s := Settings{Epochs: 8, BatchSize: 64, Optimizer: Optimizer{Rate: 1e-12},
		Objective: Adversarial{DiscriminatorRate: 1e-2, WinningSteps: 50}}
	straight, err := New(build(), s)
	require.NoError(t, err)
	want, err := straight.Run(context.Background(), d, nil)
	require.NoError(t, err)
	require.NotEmpty(t, want.Warnings)

	s.Epochs = 4
	first, err := New(build(), s)
	require.NoError(t, err)
	_, err = first.Run(context.Background(), d, nil)
	require.NoError(t, err)
	ck, err := first.Checkpoint(nil)
	require.NoError(t, err)
	r, err := Resume(ck, nil)
	require.NoError(t, err)
	require.NoError(t, r.SetEpochs(8))
	got, err := r.Run(context.Background(), d, nil)
	require.NoError(t, err)
	require.Equal(t, want.Warnings, got.Warnings)
}

// A negative CollapseRatio turns the collapse warning off, and only it.
func TestCollapseWarningOff(t *testing.T) {
	m, err := gan.New(gan.Config{Outputs: 2, Noise: 2, GenHidden: []int{4}, DiscHidden: []int{32}, Seed: 1})
	require.NoError(t, err)
	last := m.Generator.Layers[len(m.Generator.Layers)-1]
	for i := 0; i < last.W.Len(); i++ {
		last.W.SetAt(i, 0)
	}
	h := fit(t, m, ring(1024, 2), nil, Settings{Epochs: 8, BatchSize: 64, Optimizer: Optimizer{Rate: 1e-12},
		Objective: Adversarial{DiscriminatorRate: 1e-2, WinningSteps: 50, CollapseRatio: -0.5}})
	kinds := map[string]bool{}
	for _, w := range h.Warnings {
		kinds[w.Kind] = true
	}
	require.Equal(t, map[string]bool{"discriminator_wins": true}, kinds)
}

// A beta schedule without steps is constant rather than a division by
// zero (Settings refuse it; Factor is public).
func TestBetaFactorWithoutSteps(t *testing.T) {
	for _, k := range []BetaKind{BetaLinear, BetaCyclical} {
		require.Equal(t, 1.0, BetaSchedule{Kind: k}.Factor(3))
	}
}
