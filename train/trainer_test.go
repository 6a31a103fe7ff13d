package train_test

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"strings"
	"testing"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/optim"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

// The same seed gives bitwise the same model whatever the thread count:
// the matrix products and element-wise loops that run in parallel compute
// each element in one goroutine, in one order. The shapes are large enough
// for every parallel path to split.
func TestSameModelAtAnyThreadCount(t *testing.T) {
	rng := rand.New(rand.NewPCG(12, 1))
	x := make([]float32, 1000*784)
	for i := range x {
		x[i] = float32(0.5 + 0.5*math.Tanh(rng.NormFloat64()))
	}
	big, err := data.New(x, 1000, 784)
	require.NoError(t, err)
	for _, kind := range []string{"ae", "vae", "gan"} {
		t.Run(kind, func(t *testing.T) {
			run := func(procs int) [][]float64 {
				old := runtime.GOMAXPROCS(procs)
				defer runtime.GOMAXPROCS(old)
				var m train.Model
				switch kind {
				case "ae":
					m = mustModel(ae.New(ae.Config{Inputs: 784, Hidden: []int{256}, Latent: 16, Scaling: data.ScaleNone, Dropout: 0.1, Seed: 3}))
				case "vae":
					m = mustModel(vae.New(vae.Config{Inputs: 784, Hidden: []int{256}, Latent: 8, Scaling: data.ScaleNone, Seed: 3}))
				default:
					m = mustModel(gan.New(gan.Config{Outputs: 784, Noise: 16, GenHidden: []int{256}, DiscHidden: []int{256}, Scaling: data.ScaleNone, Seed: 3}))
				}
				tr, err := train.New(m, train.Settings{Epochs: 1, BatchSize: 250})
				require.NoError(t, err)
				_, err = tr.Run(context.Background(), big, nil)
				require.NoError(t, err)
				var w [][]float64
				for _, p := range m.(interface{ Params() []*layers.Param }).Params() {
					w = append(w, p.Values())
				}
				return w
			}
			require.Equal(t, run(1), run(2))
		})
	}
}

// A learning rate far too large makes the loss overflow: a typed error
// naming the epoch and step, never a model of NaNs.
func TestDivergenceIsATypedError(t *testing.T) {
	bc := testenv.BreastCancer(t)
	m, err := ae.New(ae.Config{Inputs: 30, Hidden: []int{16}, Latent: 4, Scaling: data.ScaleNone, Seed: 1})
	require.NoError(t, err)
	tr, err := train.New(m, train.Settings{Epochs: 50, Optimizer: train.Optimizer{Rate: 1e6}})
	require.NoError(t, err)
	_, err = tr.Run(context.Background(), bc, nil)
	var nf *train.NonFiniteError
	require.True(t, errors.As(err, &nf), "%v", err)
	require.GreaterOrEqual(t, nf.Epoch, 1)
	require.GreaterOrEqual(t, nf.Step, 1)
}

// What may change when resuming: epochs (a run taken further), callbacks;
// what may not: the batch size, the optimiser, the objective. A schedule
// of the caller's own must be given again.
func TestResumeSettings(t *testing.T) {
	bc := testenv.BreastCancer(t)
	build := func() *ae.Model {
		return mustModel(ae.New(ae.Config{Inputs: 30, Hidden: []int{8}, Latent: 3, Seed: 2}))
	}
	s := train.Settings{Epochs: 2, BatchSize: 32, Optimizer: train.Optimizer{Rate: 2e-3, Schedule: optim.Cosine{Steps: 100, Min: 0.1}},
		Objective: train.Reconstruction{Noise: train.Corruption{Kind: train.GaussianNoise, Level: 0.1}}}
	tr, err := train.New(build(), s)
	require.NoError(t, err)
	_, err = tr.Run(context.Background(), bc, nil)
	require.NoError(t, err)
	ck, err := tr.Checkpoint(nil)
	require.NoError(t, err)

	// the stored settings come back typed, schedule included
	r, err := train.Resume(ck, nil)
	require.NoError(t, err)
	got := r.Settings()
	require.Equal(t, 32, got.BatchSize)
	require.Equal(t, optim.Cosine{Steps: 100, Min: 0.1}, got.Optimizer.Schedule)
	require.Equal(t, train.Reconstruction{Noise: train.Corruption{Kind: train.GaussianNoise, Level: 0.1}, HeadWeight: 1}, got.Objective)

	// taken further: 2 more epochs, the same as 4 straight
	r, err = train.Resume(ck, &train.Settings{Epochs: 4})
	require.NoError(t, err)
	h, err := r.Run(context.Background(), bc, nil)
	require.NoError(t, err)
	require.Len(t, h.Epochs, 4)
	s4 := s
	s4.Epochs = 4
	straight, err := train.New(build(), s4)
	require.NoError(t, err)
	h4, err := straight.Run(context.Background(), bc, nil)
	require.NoError(t, err)
	require.Equal(t, h4.Epochs, h.Epochs)

	// tampered optimiser state or history is refused at Resume, not at
	// the first step or the first report
	for _, tamper := range []func(f *modelfile.File){
		func(f *modelfile.File) {
			for i, tn := range f.Tensors {
				if strings.Contains(tn.Name, "#") {
					f.Tensors[i].F64, f.Tensors[i].Cols = tn.F64[:1], 1
					return
				}
			}
			t.Fatal("no optimiser tensor in the checkpoint")
		},
		func(f *modelfile.File) {
			for i, tn := range f.Tensors {
				if strings.Contains(tn.Name, "#") {
					f.Tensors[i].Name = strings.Replace(tn.Name, "#", "x#", 1)
					return
				}
			}
		},
		func(f *modelfile.File) {
			var sec map[string]json.RawMessage
			_, err := f.Section("checkpoint", &sec)
			require.NoError(t, err)
			sec["history"] = json.RawMessage(`{"epochs":[{"train":[]}],"best_epoch":1}`)
			require.NoError(t, f.SetSection("checkpoint", sec))
		},
	} {
		c := *ck
		c.Tensors = append([]modelfile.Tensor(nil), ck.Tensors...)
		c.Meta = append(json.RawMessage(nil), ck.Meta...)
		tamper(&c)
		_, err := train.Resume(&c, nil)
		require.Error(t, err)
	}

	for _, bad := range []train.Settings{
		{BatchSize: 64},
		{Optimizer: train.Optimizer{Rate: 1e-3}},
		{Objective: train.Reconstruction{}},
		{Objective: train.Variational{}},
	} {
		_, err := train.Resume(ck, &bad)
		require.ErrorIs(t, err, train.ErrConfig, "%+v", bad)
	}

	// a schedule of one's own is not stored: resuming asks for it
	own := s
	own.Optimizer.Schedule = halving{}
	tr, err = train.New(build(), own)
	require.NoError(t, err)
	_, err = tr.Run(context.Background(), bc, nil)
	require.NoError(t, err)
	ck, err = tr.Checkpoint(nil)
	require.NoError(t, err)
	_, err = train.Resume(ck, nil)
	require.ErrorContains(t, err, "schedule of its own")
	r, err = train.Resume(ck, &train.Settings{Optimizer: train.Optimizer{Schedule: halving{}}})
	require.NoError(t, err)
	require.Equal(t, halving{}, r.Settings().Optimizer.Schedule)

	// a model file is not a checkpoint
	f, err := tr.File(nil)
	require.NoError(t, err)
	_, err = train.Resume(f, nil)
	require.ErrorContains(t, err, "not a checkpoint")
}

type halving struct{}

func (halving) Factor(step int) float64 { return math.Pow(0.5, float64(step/10)) }

// Settings marshal as the model files store them and come back equal.
func TestSettingsJSON(t *testing.T) {
	for _, s := range []train.Settings{
		{Epochs: 3, BatchSize: 7, Patience: 2, MinDelta: 0.1, KeepLast: true,
			Optimizer: train.Optimizer{Rate: 0.1, Beta1: -1, Beta2: 0.9, WeightDecay: 0.01, ClipNorm: 5, Schedule: optim.Warmup{Steps: 5, Then: optim.StepDecay{Every: 3, Gamma: 0.5}}},
			Objective: train.Reconstruction{Sparsity: train.Sparsity{Kind: train.KLSparsity, Weight: 1, Target: 0.1}, HeadOnly: true}},
		{Epochs: 1, BatchSize: 1, Objective: train.Variational{Beta: 2, Schedule: train.BetaSchedule{Kind: train.BetaCyclical, Steps: 4, Ratio: 0.25}, FreeBits: 0.5}},
		{Epochs: 1, BatchSize: 1, Objective: train.Adversarial{Loss: train.Minimax, DiscSteps: 3, LabelSmoothing: 0.1, DiscriminatorRate: 1e-3}},
	} {
		b, err := s.MarshalJSON()
		require.NoError(t, err)
		var back train.Settings
		require.NoError(t, back.UnmarshalJSON(b))
		require.Equal(t, s, back, "%s", b)
	}
}

// A nil model, typed or not, is an error, not a panic.
func TestNilModels(t *testing.T) {
	for _, m := range []train.Model{nil, (*ae.Model)(nil), (*vae.Model)(nil), (*gan.Model)(nil)} {
		_, err := train.New(m, train.Settings{})
		require.ErrorIs(t, err, train.ErrConfig, "%T", m)
	}
}

// Fewer rows than a packed discriminator sees at once cannot train: an
// error naming Pack, not an epoch without figures.
func TestTooFewRowsForPack(t *testing.T) {
	m := mustModel(gan.New(gan.Config{Outputs: 2, Noise: 2, GenHidden: []int{4}, DiscHidden: []int{4}, Pack: 4}))
	tr, err := train.New(m, train.Settings{Epochs: 1, BatchSize: 8})
	require.NoError(t, err)
	d := &data.Dataset{Rows: 3, Cols: 2, X: []float32{0, 1, 1, 0, 0.5, 0.5}}
	_, err = tr.Run(context.Background(), d, nil)
	require.ErrorContains(t, err, "Pack")
}

// A run stopped within an epoch has moved past its history: a checkpoint
// then is refused, and one taken at the end of an epoch still works.
func TestNoCheckpointWithinAnEpoch(t *testing.T) {
	bc := testenv.BreastCancer(t)
	m := mustModel(ae.New(ae.Config{Inputs: 30, Hidden: []int{8}, Latent: 3, Seed: 2}))
	tr, err := train.New(m, train.Settings{Epochs: 3, BatchSize: 32})
	require.NoError(t, err)
	ctx, cancel := context.WithCancel(context.Background())
	steps := 0
	tr.SetCallbacks(train.Callbacks{OnStep: func(p train.Progress) {
		if steps++; p.Epoch == 2 && p.Step == 3 {
			cancel()
		}
	}})
	_, err = tr.Run(ctx, bc, nil)
	require.ErrorIs(t, err, context.Canceled)
	_, err = tr.Checkpoint(nil)
	require.ErrorIs(t, err, train.ErrConfig)
	require.ErrorContains(t, err, "within epoch 2")

	tr, err = train.New(mustModel(ae.New(ae.Config{Inputs: 30, Hidden: []int{8}, Latent: 3, Seed: 2})), train.Settings{Epochs: 3, BatchSize: 32})
	require.NoError(t, err)
	stop := errors.New("stop")
	tr.SetCallbacks(train.Callbacks{OnEpoch: func(p train.Progress, _ *train.History) error {
		_, err := tr.Checkpoint(nil)
		require.NoError(t, err)
		return stop
	}})
	_, err = tr.Run(context.Background(), bc, nil)
	require.ErrorIs(t, err, stop)
	_, err = tr.Checkpoint(nil)
	require.NoError(t, err)
}

// A batch size far beyond the rows costs only the rows (common practice,
// no source: allocation bounded by what the input justifies).
func TestHugeBatchSizeIsBoundedByTheRows(t *testing.T) {
	bc := testenv.BreastCancer(t)
	tr, err := train.New(mustModel(ae.New(ae.Config{Inputs: 30, Hidden: []int{8}, Latent: 3, Seed: 2})), train.Settings{Epochs: 1, BatchSize: 1 << 40})
	require.NoError(t, err)
	h, err := tr.Run(context.Background(), bc, nil)
	require.NoError(t, err)
	require.Len(t, h.Epochs, 1)
}

// Early stopping restores the best epoch's weights at the end; a run
// checkpointed after its best epoch and resumed restores the same
// weights as the straight run, bitwise (common practice, no source: the
// reproducibility contract of Resume).
func TestResumeKeepsTheBestWeights(t *testing.T) {
	bc := testenv.BreastCancer(t)
	tr, va, err := bc.Split(0.3, rand.New(rand.NewPCG(1, 2)))
	require.NoError(t, err)
	build := func() *ae.Model {
		return mustModel(ae.New(ae.Config{Inputs: 30, Hidden: []int{8}, Latent: 3, Seed: 4}))
	}
	// no epoch after the first counts as better: the run stops after
	// epoch 4 and goes back to epoch 1
	s := train.Settings{Epochs: 10, BatchSize: 32, Patience: 3, MinDelta: 1e9}
	straight := build()
	st, err := train.New(straight, s)
	require.NoError(t, err)
	want, err := st.Run(context.Background(), tr, va)
	require.NoError(t, err)
	require.True(t, want.Restored)
	require.Equal(t, 1, want.BestEpoch)
	require.Len(t, want.Epochs, 4)

	first, err := train.New(build(), s)
	require.NoError(t, err)
	stop := errors.New("stop")
	var ck *modelfile.File
	first.SetCallbacks(train.Callbacks{OnEpoch: func(p train.Progress, _ *train.History) error {
		if p.Epoch < 2 {
			return nil
		}
		ck, err = first.Checkpoint(nil)
		require.NoError(t, err)
		return stop
	}})
	_, err = first.Run(context.Background(), tr, va)
	require.ErrorIs(t, err, stop)
	r, err := train.Resume(ck, nil)
	require.NoError(t, err)
	got, err := r.Run(context.Background(), tr, va)
	require.NoError(t, err)
	require.Equal(t, want.Epochs, got.Epochs)
	require.True(t, got.Restored)
	for i, p := range r.Model().(*ae.Model).Params() {
		q := straight.Params()[i]
		for j := 0; j < p.Len(); j++ {
			require.Equal(t, q.At(j), p.At(j), "%s[%d]", p.Name(), j)
		}
	}
}

// A table's missing cells are left out of an autoencoder's reconstruction
// loss: the validation loss the run reports is MaskedMSE of the scaled
// rows against the model's reconstruction with the missing cells' inputs
// masked (worked from the model's own passes), and not the plain MSE.
func TestMissingCellsLeftOutOfTheLoss(t *testing.T) {
	var b strings.Builder
	b.WriteString("a,b,c\n")
	for i := range 200 {
		a := fmt.Sprint(float64(i%13) / 2)
		if i%5 == 0 {
			a = ""
		}
		c := []string{"x", "y", "z"}[i%3]
		if i%7 == 0 {
			c = "NA"
		}
		fmt.Fprintf(&b, "%s,%d,%s\n", a, i%4, c)
	}
	d, err := data.ReadCSV(strings.NewReader(b.String()), "t.csv", data.CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Equal(t, 7, d.Cols) // a, a (missing), b, c=x, c=y, c=z, c (missing)
	tr, va := d.Subset(seq(0, 150)), d.Subset(seq(150, 200))
	m, err := ae.New(ae.Config{Inputs: d.Cols, Hidden: []int{6}, Latent: 2, Seed: 4, Precision: layers.Float64})
	require.NoError(t, err)
	h := trainenv.Fit(t, m, tr, va, train.Settings{Epochs: 2, BatchSize: 50})
	_, got := h.Loss(2)
	rec, err := m.Reconstruct(va.X, va.Rows)
	require.NoError(t, err)
	in := append([]float32(nil), va.X...)
	m.Scaler.ApplyRows(in)
	m.Scaler.ApplyRows(rec)
	var p, y, mask []float64
	for r := range va.Rows {
		row := va.Row(r)
		for j := range d.Cols {
			p, y = append(p, float64(rec[r*d.Cols+j])), append(y, float64(in[r*d.Cols+j]))
			keep := 1.0
			if (j == 0 && row[1] == 1) || (j >= 3 && j <= 5 && row[6] == 1) {
				keep = 0
			}
			mask = append(mask, keep)
		}
	}
	want, err := losses.MaskedMSE(p, y, mask)
	require.NoError(t, err)
	plain, err := losses.MSE(p, y)
	require.NoError(t, err)
	// tolerance: the reconstruction comes back through float32 (1e-6
	// relative); the plain MSE is farther off than that
	require.InDelta(t, want, got, 1e-6*want)
	require.Greater(t, math.Abs(plain-got), 1e-3*got, "the plain MSE differs, so the test can tell them apart")
}

// A table's categories reconstruct as probabilities and train by their
// cross-entropy: the reported validation loss is the squared error of the
// other observed inputs plus -sum t log p over the categories' observed
// levels, both summed over the batch and divided by its inputs, worked
// here from the model's own reconstruction (by definition, no source).
func TestCategoriesTrainByCrossEntropy(t *testing.T) {
	var b strings.Builder
	b.WriteString("a,b,c\n")
	for i := range 200 {
		a := fmt.Sprint(float64(i%13) / 2)
		if i%5 == 0 {
			a = ""
		}
		c := []string{"x", "y", "z"}[(i/2)%3]
		if i%7 == 0 {
			c = "NA"
		}
		fmt.Fprintf(&b, "%s,%d,%s\n", a, i%4, c)
	}
	d, err := data.ReadCSV(strings.NewReader(b.String()), "t.csv", data.CSVConfig{Typed: true})
	require.NoError(t, err)
	spans := d.Encoding.CategorySpans()
	require.Equal(t, [][2]int{{3, 6}}, spans)
	tr, va := d.Subset(seq(0, 150)), d.Subset(seq(150, 200))
	m, err := ae.New(ae.Config{Inputs: d.Cols, Hidden: []int{6}, Latent: 2, Seed: 4, Precision: layers.Float64, Categories: spans})
	require.NoError(t, err)
	h := trainenv.Fit(t, m, tr, va, train.Settings{Epochs: 3, BatchSize: 50})
	_, got := h.Loss(3)
	raw, err := m.Reconstruct(va.X, va.Rows)
	require.NoError(t, err)
	in := append([]float32(nil), va.X...)
	rec := append([]float32(nil), raw...)
	m.Scaler.ApplyRows(in)
	m.Scaler.ApplyRows(rec)
	var sq, ce float64
	for r := range va.Rows {
		row := va.Row(r)
		total := 0.0
		for j := 3; j < 6; j++ {
			total += float64(raw[r*d.Cols+j])
		}
		require.InDelta(t, 1, total, 1e-6, "row %d: the levels' probabilities sum to 1", r)
		for j := range d.Cols {
			switch {
			case j >= 3 && j < 6:
				if row[j] == 1 {
					ce -= math.Log(float64(raw[r*d.Cols+j]))
				}
			case j == 0 && row[1] == 1:
			default:
				e := float64(rec[r*d.Cols+j]) - float64(in[r*d.Cols+j])
				sq += e * e
			}
		}
	}
	want := (sq + ce) / float64(va.Rows*d.Cols)
	// tolerance: the reconstruction comes back through float32 (1e-6
	// relative)
	require.InDelta(t, want, got, 1e-5*want)
	require.Greater(t, ce, 0.0)
}

func seq(lo, hi int) []int {
	out := make([]int, 0, hi-lo)
	for i := lo; i < hi; i++ {
		out = append(out, i)
	}
	return out
}
