package model_test

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sync"
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/stretchr/testify/require"
)

// The contracts every model keeps, checked on the model files of
// testdata/compat (three kinds, both precisions).

var compatFiles = []string{"ae-plain", "ae-kinds", "ae-f64", "vae-bernoulli", "vae-gaussian", "vae-f64", "gan-bce", "gan-wasserstein", "gan-f64"}

func open(t *testing.T, name string) (model.Model, *modelfile.File) {
	t.Helper()
	f := testenv.Compat(t, name+".qm")
	m, err := model.FromFile(f)
	require.NoError(t, err)
	return m, f
}

// rows returns n rows of the data the compat model was trained on.
func rows(t *testing.T, m model.Model, n int) []float32 {
	var d *data.Dataset
	switch m.Width() {
	case 30:
		d = testenv.BreastCancer(t)
	case 64:
		d = testenv.Digits(t)
	default:
		d = testenv.Fashion(t, "t10k")
	}
	return d.X[:n*d.Cols]
}

// What each kind can do, asked by capability.
func TestCapabilities(t *testing.T) {
	want := map[string][]string{
		"ae":  {"Scorer", "Calibrator", "Encoder", "Decoder", "Reconstructor"},
		"vae": {"Scorer", "Calibrator", "Encoder", "Decoder", "Reconstructor", "Sampler", "Interpolator", "Density"},
		"gan": {"Sampler", "ClassSampler"},
	}
	for _, name := range compatFiles {
		m, _ := open(t, name)
		var has []string
		for _, c := range []struct {
			name string
			ok   bool
		}{
			{"Scorer", is[model.Scorer](m)}, {"Calibrator", is[model.Calibrator](m)}, {"Encoder", is[model.Encoder](m)},
			{"Decoder", is[model.Decoder](m)}, {"Reconstructor", is[model.Reconstructor](m)}, {"Sampler", is[model.Sampler](m)},
			{"ClassSampler", is[model.ClassSampler](m)}, {"Interpolator", is[model.Interpolator](m)}, {"Density", is[model.Density](m)},
		} {
			if c.ok {
				has = append(has, c.name)
			}
		}
		require.Equal(t, want[m.Kind()], has, name)
		c, classifies := m.(model.Classifier)
		require.Equal(t, name == "ae-kinds", classifies && c.Classes() > 0, name)
	}
}

func is[C any](m model.Model) bool { _, ok := m.(C); return ok }

// outputs runs every capability the model has on rows x and returns the
// results, for comparisons.
func outputs(t testing.TB, m model.Model, x []float32, n int) map[string]any {
	o := map[string]any{}
	put := func(key string, v any, err error) {
		require.NoError(t, err, key)
		o[key] = v
	}
	if s, ok := m.(model.Scorer); ok {
		v, err := s.RowScores(x, n)
		put("scores", v, err)
		if s.Calibrated() != nil {
			a, err := s.Score(x, n, 2)
			put("assessed", a, err)
		}
	}
	if e, ok := m.(model.Encoder); ok {
		v, err := e.Encode(x, n)
		put("codes", v, err)
		if d, ok := m.(model.Decoder); ok {
			r, err := d.Decode(v, n)
			put("decoded", r, err)
		}
	}
	if r, ok := m.(model.Reconstructor); ok {
		v, err := r.Reconstruct(x, n)
		put("reconstructions", v, err)
	}
	if s, ok := m.(model.Sampler); ok {
		v, err := s.Sample(3, 11)
		put("samples", v, err)
	}
	if d, ok := m.(model.Density); ok {
		v, err := d.IWAE(x, n, 3, 5)
		put("iwae", v, err)
	}
	return o
}

// Many goroutines use one model at once; every result equals the
// sequential one bitwise. Run under -race.
func TestConcurrentUse(t *testing.T) {
	for _, name := range compatFiles {
		t.Run(name, func(t *testing.T) {
			m, _ := open(t, name)
			x := rows(t, m, 5)
			want := fmt.Sprint(outputs(t, m, x, 5))
			var wg sync.WaitGroup
			errs := make(chan error, 16)
			for g := 0; g < 8; g++ {
				wg.Add(1)
				go func() {
					defer wg.Done()
					for i := 0; i < 5; i++ {
						if got := fmt.Sprint(outputs(t, m, x, 5)); got != want {
							errs <- errors.New("a concurrent result differs from the sequential one")
							return
						}
					}
				}()
			}
			wg.Wait()
			close(errs)
			for err := range errs {
				require.NoError(t, err)
			}
		})
	}
}

// A model written back to a file and opened again has the same
// parameters, schema and outputs, bitwise.
func TestRoundTrip(t *testing.T) {
	for _, name := range compatFiles {
		t.Run(name, func(t *testing.T) {
			m, _ := open(t, name)
			f, err := m.File(&modelfile.Provenance{DataFile: "x.csv"})
			require.NoError(t, err)
			l, err := model.FromFile(f)
			require.NoError(t, err)
			require.Equal(t, m.Schema(), l.Schema())
			for i, p := range m.Params() {
				require.Equal(t, p.Values(), l.Params()[i].Values(), p.Name())
			}
			x := rows(t, m, 4)
			require.Equal(t, fmt.Sprint(outputs(t, m, x, 4)), fmt.Sprint(outputs(t, l, x, 4)))
			p, err := modelfile.ProvenanceOf(f)
			require.NoError(t, err)
			require.Equal(t, "x.csv", p.DataFile)
		})
	}
}

// A threshold set with Calibrate is the one Score uses and the model file
// keeps.
func TestCalibrateThenScore(t *testing.T) {
	m, _ := open(t, "vae-gaussian")
	x := rows(t, m, 200)
	th, err := m.(model.Calibrator).Calibrate(x, 200, anomaly.Config{Method: anomaly.Max})
	require.NoError(t, err)
	require.Equal(t, th, *m.(model.Scorer).Calibrated())
	s, err := m.(model.Scorer).Score(x, 200, 1)
	require.NoError(t, err)
	for _, r := range s {
		require.False(t, r.Anomaly, "the largest calibration score is the threshold")
	}
}

// A file whose settings promise more than its tensors hold is refused
// before anything is built for it: a huge width, a hundred thousand
// layers, a mismatched shape, an unknown kind.
func TestLyingSettingsAreRefused(t *testing.T) {
	for _, name := range []string{"ae-plain", "vae-gaussian", "gan-bce"} {
		f := testenv.Compat(t, name+".qm")
		var meta map[string]json.RawMessage
		require.NoError(t, json.Unmarshal(f.Meta, &meta))
		var cfg map[string]any
		require.NoError(t, json.Unmarshal(meta["config"], &cfg))
		hidden := "Hidden"
		if name == "gan-bce" {
			hidden = "DiscHidden"
		}
		width := "Inputs"
		if name == "gan-bce" {
			width = "Outputs"
		}
		many := make([]int, 100000)
		for i := range many {
			many[i] = 1 << 20
		}
		for _, lie := range []map[string]any{
			{width: 1 << 40},
			{hidden: many},
			{"Latent": 1 << 30, "Noise": 1 << 30},
			{"Precision": "float64"},
		} {
			c := map[string]any{}
			for k, v := range cfg {
				c[k] = v
			}
			for k, v := range lie {
				c[k] = v
			}
			b, err := json.Marshal(c)
			require.NoError(t, err)
			meta["config"] = b
			mb, err := json.Marshal(meta)
			require.NoError(t, err)
			g := *f
			g.Meta = mb
			_, err = model.FromFile(&g)
			require.Error(t, err, "%s with %v", name, lie)
		}
	}
	f := testenv.Compat(t, "ae-plain.qm")
	f.Kind = "rbm"
	_, err := model.FromFile(f)
	require.ErrorContains(t, err, "unknown model kind")
}

// A checkpoint opens as the model it holds.
func TestCheckpointOpensAsItsModel(t *testing.T) {
	m, err := model.FromFile(testenv.Compat(t, "gan-wasserstein.ckpt"))
	require.NoError(t, err)
	require.Equal(t, "gan", m.Kind())
	v, err := m.(model.Sampler).Sample(2, 1)
	require.NoError(t, err)
	for _, x := range v {
		require.False(t, math.IsNaN(float64(x)))
	}
}
