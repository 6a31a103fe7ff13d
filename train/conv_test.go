package train_test

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"runtime"
	"testing"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

// blobs is n grey 10x9 images, each a bright disc at a random place on a
// dark ground, values in [0, 1].
func blobs(n int, seed uint64) *data.Dataset {
	const h, w = 10, 9
	rng := rand.New(rand.NewPCG(seed, 3))
	x := make([]float32, n*h*w)
	for i := 0; i < n; i++ {
		cy, cx, r := 2+rng.Float64()*6, 2+rng.Float64()*5, 1.5+rng.Float64()*1.5
		for y := 0; y < h; y++ {
			for xx := 0; xx < w; xx++ {
				d := math.Hypot(float64(y)-cy, float64(xx)-cx)
				x[(i*h+y)*w+xx] = float32(1 / (1 + math.Exp(3*(d-r))))
			}
		}
	}
	d, err := data.New(x, n, h*w)
	if err != nil {
		panic(err)
	}
	d.Image = []int{h, w, 1}
	return d
}

// convCases are a model of each kind with convolutions.
var convCases = []struct {
	name  string
	build func() train.Model
}{
	{"ae", func() train.Model {
		return mustModel(ae.New(ae.Config{Inputs: 90, Image: []int{10, 9, 1}, Channels: []int{4, 8}, Hidden: []int{}, Latent: 4, Loss: ae.BCE, Scaling: data.ScaleNone, Seed: 5}))
	}},
	{"vae", func() train.Model {
		return mustModel(vae.New(vae.Config{Inputs: 90, Image: []int{10, 9, 1}, Channels: []int{4, 8}, Hidden: []int{}, Latent: 3, Seed: 5}))
	}},
	{"gan", func() train.Model {
		return mustModel(gan.New(gan.Config{Outputs: 90, Image: []int{10, 9, 1}, Channels: []int{4, 8}, Noise: 4, GenHidden: []int{}, DiscHidden: []int{16},
			GenOutput: layers.Sigmoid, SpectralNorm: true, Scaling: data.ScaleNone, Seed: 5}))
	}},
}

// Models with convolutions train like the others: the loss falls, the
// same seed gives bitwise the same weights at one thread and at two, a
// run stopped at a checkpoint and resumed ends bitwise where the straight
// run does, and the model file opens to a model whose outputs are the
// trained model's.
func TestConvModelsTrainResumeAndOpen(t *testing.T) {
	d := blobs(96, 1)
	va := blobs(32, 2)
	for _, c := range convCases {
		t.Run(c.name, func(t *testing.T) {
			s := train.Settings{Epochs: 4, BatchSize: 16}
			run := func(procs int) (*train.Trainer, *train.History) {
				old := runtime.GOMAXPROCS(procs)
				defer runtime.GOMAXPROCS(old)
				tr, err := train.New(c.build(), s)
				require.NoError(t, err)
				h, err := tr.Run(context.Background(), d, va)
				require.NoError(t, err)
				return tr, h
			}
			tr1, h := run(1)
			tr2, _ := run(2)
			f1, err := tr1.File(nil)
			require.NoError(t, err)
			f2, err := tr2.File(nil)
			require.NoError(t, err)
			sameTensors(t, f1, f2)
			if c.name != "gan" {
				first, last := h.Epochs[0].Train[0].Value, h.Epochs[len(h.Epochs)-1].Train[0].Value
				require.Less(t, last, first, "the training loss falls")
			}

			// stopped after epoch 2 and resumed
			first, err := train.New(c.build(), s)
			require.NoError(t, err)
			var ck *modelfile.File
			stop := errors.New("stop")
			first.SetCallbacks(train.Callbacks{OnEpoch: func(p train.Progress, _ *train.History) error {
				if p.Epoch < 2 {
					return nil
				}
				f, err := first.Checkpoint(nil)
				require.NoError(t, err)
				var b bytes.Buffer
				require.NoError(t, modelfile.Encode(&b, f))
				ck, err = modelfile.Decode(b.Bytes(), "checkpoint")
				require.NoError(t, err)
				return stop
			}})
			_, err = first.Run(context.Background(), d, va)
			require.ErrorIs(t, err, stop)
			r, err := train.Resume(ck, nil)
			require.NoError(t, err)
			_, err = r.Run(context.Background(), d, va)
			require.NoError(t, err)
			f3, err := r.File(nil)
			require.NoError(t, err)
			sameTensors(t, f1, f3)

			// the file opens to the same model
			var b bytes.Buffer
			require.NoError(t, modelfile.Encode(&b, f1))
			g, err := modelfile.Decode(b.Bytes(), "conv model")
			require.NoError(t, err)
			opened, err := model.FromFile(g)
			require.NoError(t, err)
			require.Equal(t, []int{10, 9, 1}, opened.Schema().Image)
			want := outputsOf(t, tr1.Model(), va)
			require.Equal(t, want, outputsOf(t, opened, va))
		})
	}
}

// outputsOf is what a model gives for the first rows of d: codes and
// reconstructions, or samples.
func outputsOf(t *testing.T, m any, d *data.Dataset) [][]float32 {
	const n = 5
	x := d.X[:n*d.Cols]
	var out [][]float32
	if e, ok := m.(interface {
		Encode([]float32, int) ([]float32, error)
	}); ok {
		z, err := e.Encode(x, n)
		require.NoError(t, err)
		out = append(out, z)
	}
	if r, ok := m.(interface {
		Reconstruct([]float32, int) ([]float32, error)
	}); ok {
		y, err := r.Reconstruct(x, n)
		require.NoError(t, err)
		out = append(out, y)
	}
	if s, ok := m.(interface {
		Sample(int, uint64) ([]float32, error)
	}); ok {
		y, err := s.Sample(n, 7)
		require.NoError(t, err)
		out = append(out, y)
	}
	require.NotEmpty(t, out)
	return out
}

// A bright square pasted on an image is where its heat map burns: the
// departures (model.Explainer) of the square's pixels average over five
// times the rest's, for a convolutional autoencoder and VAE trained on
// discs.
func TestDeparturesFindAPastedSquare(t *testing.T) {
	d := blobs(512, 3)
	test := blobs(8, 4)
	inside := func(y, x int) bool { return y >= 6 && y < 9 && x >= 0 && x < 3 }
	for i := 0; i < test.Rows; i++ {
		for y := 0; y < 10; y++ {
			for x := 0; x < 9; x++ {
				if inside(y, x) {
					test.X[i*90+y*9+x] = 1
				}
			}
		}
	}
	for _, c := range convCases[:2] {
		t.Run(c.name, func(t *testing.T) {
			tr, err := train.New(c.build(), train.Settings{Epochs: 30, BatchSize: 32})
			require.NoError(t, err)
			_, err = tr.Run(context.Background(), d, nil)
			require.NoError(t, err)
			ex := tr.Model().(model.Explainer)
			dep, err := ex.Departures(test.X, test.Rows)
			require.NoError(t, err)
			var in, out float64
			var nIn, nOut int
			for i := 0; i < test.Rows; i++ {
				for y := 0; y < 10; y++ {
					for x := 0; x < 9; x++ {
						v := dep[i*90+y*9+x]
						require.GreaterOrEqual(t, v, 0.0)
						if inside(y, x) {
							in, nIn = in+v, nIn+1
						} else {
							out, nOut = out+v, nOut+1
						}
					}
				}
			}
			require.Greater(t, in/float64(nIn), 5*out/float64(nOut), "mean departure inside the square against outside")
		})
	}
}

// convGolden is testdata/conv/training.json: for each case of convCases
// trained 4 epochs on blobs, the SHA-256 of its parameters' values (each
// float's bits, little-endian, in Params order) and its history.
type convGolden struct {
	Source string                    `json:"source"`
	Cases  map[string]convGoldenCase `json:"cases"`
}

type convGoldenCase struct {
	Weights string              `json:"weights_sha256"`
	Epochs  []train.EpochRecord `json:"epochs"`
}

const convGoldenPath = "../testdata/conv/training.json"

// Training with convolutions stays bitwise what it was when
// testdata/conv/training.json was written (go test ./train -run
// TestConvTrainingGolden -update rewrites it, after a change meant to
// alter the weights: say which in the commit): a change in the kernels'
// order of sums, the initialisation or the streams shows here.
func TestConvTrainingGolden(t *testing.T) {
	ownProduct(t)
	d, va := blobs(96, 1), blobs(32, 2)
	got := convGolden{Source: "go test ./train -run TestConvTrainingGolden -update (Go computes it: blobs(96, 1) and blobs(32, 2), 4 epochs of batch 16)", Cases: map[string]convGoldenCase{}}
	for _, c := range convCases {
		m := c.build()
		tr, err := train.New(m, train.Settings{Epochs: 4, BatchSize: 16})
		require.NoError(t, err)
		h, err := tr.Run(context.Background(), d, va)
		require.NoError(t, err)
		sum := sha256.New()
		for _, p := range m.(interface{ Params() []*layers.Param }).Params() {
			for _, v := range p.F32() {
				binary.Write(sum, binary.LittleEndian, math.Float32bits(v))
			}
			for _, v := range p.F64() {
				binary.Write(sum, binary.LittleEndian, math.Float64bits(v))
			}
		}
		got.Cases[c.name] = convGoldenCase{Weights: hex.EncodeToString(sum.Sum(nil)), Epochs: h.Epochs}
	}
	if *update {
		b, err := json.MarshalIndent(got, "", " ")
		require.NoError(t, err)
		require.NoError(t, os.WriteFile(convGoldenPath, append(b, '\n'), 0o644))
		return
	}
	b, err := os.ReadFile(convGoldenPath)
	require.NoError(t, err)
	var want convGolden
	require.NoError(t, json.Unmarshal(b, &want))
	for name, w := range want.Cases {
		require.Equal(t, w.Weights, got.Cases[name].Weights, "%s: weights", name)
		require.Equal(t, w.Epochs, got.Cases[name].Epochs, "%s: history", name)
	}
	require.Len(t, want.Cases, len(convCases))
}
