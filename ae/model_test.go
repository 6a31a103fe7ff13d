package ae

import (
	"errors"
	"math"
	"path/filepath"
	"sync"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/modelfile"
	"github.com/stretchr/testify/require"
)

// trainedBC is the autoencoder of testdata/compat/ae-plain.qm (30-16-4,
// trained on the breast cancer rows) with those rows.
func trainedBC(t testing.TB) (*Model, *data.Dataset) {
	m, err := FromFile(testenv.Compat(t, "ae-plain.qm"))
	require.NoError(t, err)
	return m, testenv.BreastCancer(t)
}

// Many goroutines score, encode and reconstruct at once; results equal the
// sequential ones. Run under -race.
func TestConcurrentInference(t *testing.T) {
	m, bc := trainedBC(t)
	want, err := m.RowErrors(bc.X, bc.Rows)
	require.NoError(t, err)
	wantCode, err := m.Encode(bc.X[:30*7], 7)
	require.NoError(t, err)
	var wg sync.WaitGroup
	errs := make(chan error, 64)
	for g := 0; g < 16; g++ {
		wg.Add(1)
		go func(g int) {
			defer wg.Done()
			for it := 0; it < 20; it++ {
				r := (g*37 + it*11) % bc.Rows
				got, err := m.RowErrors(bc.Row(r), 1)
				if err != nil {
					errs <- err
					return
				}
				if math.Abs(got[0]-want[r]) > 1e-6*(1+want[r]) {
					errs <- errors.New("concurrent score differs from sequential")
					return
				}
				c, err := m.Encode(bc.X[:30*7], 7)
				if err != nil {
					errs <- err
					return
				}
				for i := range c {
					if c[i] != wantCode[i] {
						errs <- errors.New("concurrent code differs")
						return
					}
				}
				if _, err := m.Reconstruct(bc.Row(r), 1); err != nil {
					errs <- err
					return
				}
			}
		}(g)
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		require.NoError(t, err)
	}
}

// Batch results do not depend on batch size: a single row, odd batches and
// the whole set agree.
func TestAnyBatchSizeInference(t *testing.T) {
	m, bc := trainedBC(t)
	all, err := m.RowErrors(bc.X, bc.Rows)
	require.NoError(t, err)
	for _, n := range []int{1, 3, 127} {
		part, err := m.RowErrors(bc.X[:n*30], n)
		require.NoError(t, err)
		for i := range part {
			require.InDelta(t, all[i], part[i], 1e-9*(1+all[i]))
		}
	}
	rec, err := m.Reconstruct(bc.X[:60], 2)
	require.NoError(t, err)
	code, err := m.Encode(bc.X[:60], 2)
	require.NoError(t, err)
	dec, err := m.Decode(code, 2)
	require.NoError(t, err)
	// Reconstruct is Decode(Encode(x)), both in raw units.
	for i := range rec {
		require.InDelta(t, dec[i], rec[i], 1e-5*(1+math.Abs(float64(dec[i]))))
	}
}

func TestInputValidation(t *testing.T) {
	m, _ := trainedBC(t)
	_, err := m.RowErrors(make([]float32, 29), 1)
	require.ErrorContains(t, err, "want 1 rows x 30 columns")
	x := make([]float32, 60)
	x[45] = float32(math.NaN())
	_, err = m.Encode(x, 2)
	require.ErrorContains(t, err, "row 2 column 16")
	_, err = m.Decode(make([]float32, 3), 1)
	require.Error(t, err)
	_, _, err = m.Classify(x, 2)
	require.ErrorContains(t, err, "no classification head")
	for _, cfg := range []Config{
		{},
		{Inputs: 3, Classes: 1},
		{Inputs: 3, Loss: "hinge"},
		{Inputs: 3, Scaling: "log"},
		{Inputs: 3, Dropout: 1},
		{Inputs: 3, Hidden: []int{4, 0}},
		{Inputs: 6, Categories: [][2]int{{1, 2}}},
		{Inputs: 6, Categories: [][2]int{{0, 3}, {2, 5}}},
		{Inputs: 6, Categories: [][2]int{{4, 8}}},
		{Inputs: 6, Categories: [][2]int{{0, 3}}, Loss: BCE},
	} {
		_, err := New(cfg)
		require.ErrorIs(t, err, ErrConfig, "%+v", cfg)
	}
}

// A category's reconstruction is its levels' probabilities (a softmax,
// positive and summing to 1 in raw space) from Reconstruct and Decode
// alike, and survives a model file, which older builds refuse (version 2).
func TestCategoriesReconstructAsProbabilities(t *testing.T) {
	cats := [][2]int{{1, 4}, {5, 7}}
	m, err := New(Config{Inputs: 8, Hidden: []int{6}, Latent: 2, Seed: 3, Categories: cats})
	require.NoError(t, err)
	rows := 5
	x := make([]float32, rows*8)
	for i := range x {
		x[i] = float32(i%7) - 2
	}
	m.Scaler = &data.Scaler{Kind: data.ScaleStandard, Offset: make([]float64, 8), Factor: make([]float64, 8)}
	for j := range 8 {
		m.Scaler.Offset[j], m.Scaler.Factor[j] = 0.25*float64(j), 1/(1+0.5*float64(j))
	}
	rec, err := m.Reconstruct(x, rows)
	require.NoError(t, err)
	code, err := m.Encode(x, rows)
	require.NoError(t, err)
	dec, err := m.Decode(code, rows)
	require.NoError(t, err)
	for _, out := range [][]float32{rec, dec} {
		for r := range rows {
			for _, sp := range cats {
				var total float64
				for j := sp[0]; j < sp[1]; j++ {
					v := float64(out[r*8+j])
					require.Greater(t, v, 0.0)
					total += v
				}
				// tolerance: the probabilities go through the
				// scaler and back in float32
				require.InDelta(t, 1, total, 1e-6)
			}
		}
	}
	require.Equal(t, rec, dec, "Decode(Encode(x)) is Reconstruct(x)")
	path := filepath.Join(t.TempDir(), "m.qm")
	require.NoError(t, m.Save(path, nil))
	f, err := modelfile.Read(path, 1<<20)
	require.NoError(t, err)
	require.EqualValues(t, 2, f.Version)
	back, err := Load(path)
	require.NoError(t, err)
	require.Equal(t, cats, back.Config().Categories)
	again, err := back.Reconstruct(x, rows)
	require.NoError(t, err)
	require.Equal(t, rec, again)
}

// The Into variants allocate nothing once their buffers are warm.
func TestInferenceAllocatesNothing(t *testing.T) {
	m, bc := trainedBC(t)
	x := bc.X[:30*5]
	codes := make([]float32, 5*4)
	dec := make([]float32, 5*30)
	errs := make([]float64, 5)
	contrib := make([]float64, 5*30)
	warm := func() {
		_, _ = m.EncodeInto(codes, x, 5)
		_, _ = m.DecodeInto(dec, codes, 5)
		_, _ = m.ReconstructInto(dec, x, 5)
		_, _ = m.RowErrorsInto(errs, x, 5)
		_, _ = m.ContributionsInto(contrib, x, 5)
	}
	warm()
	if !testenv.RaceBuild { // the race detector's instrumentation allocates
		require.Zero(t, testing.AllocsPerRun(50, warm))
	}
}
