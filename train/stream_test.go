package train_test

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"testing"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

// writeLowRank writes rows of cols values that lie near a 3-dimensional
// plane (an autoencoder of code 3 can learn them), in runs of one regime
// then another as a log sorted by time would be.
func writeLowRank(t *testing.T, path string, rows, cols int) {
	t.Helper()
	rng := rand.New(rand.NewPCG(5, 6))
	mix := make([]float64, 3*cols)
	for i := range mix {
		mix[i] = rng.NormFloat64()
	}
	var b bytes.Buffer
	for j := range cols {
		if j > 0 {
			b.WriteByte(',')
		}
		fmt.Fprintf(&b, "s%d", j)
	}
	b.WriteByte('\n')
	for r := range rows {
		var z [3]float64
		for k := range z {
			z[k] = rng.NormFloat64()
		}
		z[0] += float64((r/500)%4) - 1.5 // regimes in runs of 500 rows
		for j := range cols {
			v := 0.05 * rng.NormFloat64()
			for k := range z {
				v += mix[k*cols+j] * z[k]
			}
			if j > 0 {
				b.WriteByte(',')
			}
			fmt.Fprintf(&b, "%.4f", v)
		}
		b.WriteByte('\n')
	}
	require.NoError(t, os.WriteFile(path, b.Bytes(), 0o644))
}

func streamModel(t *testing.T, kind string, cols int) train.Model {
	t.Helper()
	switch kind {
	case "vae":
		m, err := vae.New(vae.Config{Inputs: cols, Hidden: []int{16}, Latent: 3, Seed: 4, Likelihood: vae.GaussianLearned})
		require.NoError(t, err)
		return m
	default:
		m, err := ae.New(ae.Config{Inputs: cols, Hidden: []int{16}, Latent: 3, Seed: 4})
		require.NoError(t, err)
		return m
	}
}

func params(m train.Model) [][]float32 {
	var out [][]float32
	for _, p := range m.(interface{ Params() []*layers.Param }).Params() {
		out = append(out, append([]float32(nil), p.F32()...))
	}
	return out
}

// Training on a stream: the same model, bit for bit, for a seed, at 1
// and 2 threads; a validation loss near the in-memory run's on the same
// rows (the split and the order differ: a Bernoulli split and a shuffle
// buffer against a shuffled permutation); refused for a GAN.
func TestRunStream(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "rows.csv")
	writeLowRank(t, path, 8000, 12)
	for _, kind := range []string{"ae", "vae"} {
		run := func(procs int) (train.Model, *train.History) {
			old := runtime.GOMAXPROCS(procs)
			defer runtime.GOMAXPROCS(old)
			s, err := data.OpenStream(path, data.StreamConfig{Validation: 0.2, SplitSeed: 3})
			require.NoError(t, err)
			m := streamModel(t, kind, s.Cols)
			tr, err := train.New(m, train.Settings{Epochs: 6, BatchSize: 64})
			require.NoError(t, err)
			h, err := tr.RunStream(context.Background(), s, train.StreamSettings{Buffer: 1000})
			require.NoError(t, err)
			return m, h
		}
		a, ha := run(1)
		b, hb := run(2)
		require.Equal(t, params(a), params(b), kind)
		require.Equal(t, ha.Epochs, hb.Epochs, kind)

		// in memory, the same rows held out by a permutation
		d, err := data.LoadCSV(path, data.CSVConfig{})
		require.NoError(t, err)
		trs, vas, err := d.Split(0.2, rand.New(rand.NewPCG(3, 7)))
		require.NoError(t, err)
		m := streamModel(t, kind, d.Cols)
		tr, err := train.New(m, train.Settings{Epochs: 6, BatchSize: 64})
		require.NoError(t, err)
		hm, err := tr.Run(context.Background(), trs, vas)
		require.NoError(t, err)
		_, vs := ha.Loss(len(ha.Epochs))
		_, vm := hm.Loss(len(hm.Epochs))
		t.Logf("%s: validation loss streamed %.5g, in memory %.5g", kind, vs, vm)
		// common practice, no source: a different split and order of the
		// same rows moves the loss by a few per cent at most
		require.InDelta(t, vm, vs, 0.05*math.Abs(vm)+0.01, kind)
	}
	s, err := data.OpenStream(path, data.StreamConfig{})
	require.NoError(t, err)
	g, err := gan.New(gan.Config{Outputs: s.Cols, Seed: 1})
	require.NoError(t, err)
	tr, err := train.New(g, train.Settings{Epochs: 1})
	require.NoError(t, err)
	_, err = tr.RunStream(context.Background(), s, train.StreamSettings{})
	require.ErrorIs(t, err, train.ErrConfig)
}
