package ae

import (
	"context"
	"math/rand/v2"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

func fashion(t testing.TB, name string, n int) *data.Dataset {
	t.Helper()
	d, err := data.LoadIDX("../testdata/fashion-mnist/"+name+"-images-idx3-ubyte-first"+itoa(n)+".gz", data.IDXConfig{})
	require.NoError(t, err)
	return d
}

func itoa(n int) string {
	if n == 2000 {
		return "2000"
	}
	return "500"
}

func mse32(a, b []float32) float64 {
	var s float64
	for i := range a {
		d := float64(a[i]) - float64(b[i])
		s += d * d
	}
	return s / float64(len(a))
}

// Denoising (common practice, no source for the factor): with 30% masking
// noise the reconstruction of a corrupted test image is at least twice as
// close to the clean image as the corrupted input is.
func TestDenoisingHalvesTheError(t *testing.T) {
	tr, te := fashion(t, "train", 2000), fashion(t, "t10k", 500)
	m, err := New(Config{Inputs: 784, Hidden: []int{256}, Latent: 64, Loss: BCE, Scaling: data.ScaleNone,
		Noise: Corruption{Kind: MaskingNoise, Level: 0.3}, Rate: 2e-3, Seed: 5})
	require.NoError(t, err)
	_, err = m.Train(context.Background(), tr, nil, train.Config{Epochs: 8, BatchSize: 64})
	require.NoError(t, err)
	noisy := append([]float32(nil), te.X...)
	rng := rand.New(rand.NewPCG(77, 77))
	for i := range noisy {
		if rng.Float64() < 0.3 {
			noisy[i] = 0
		}
	}
	out, err := m.Reconstruct(noisy, te.Rows)
	require.NoError(t, err)
	before, after := mse32(noisy, te.X), mse32(out, te.X)
	t.Logf("MSE to clean: corrupted input %.4f, denoised %.4f (ratio %.2f)", before, after, before/after)
	require.Greater(t, before/after, 2.0)
}

// Sparse coding with a KL penalty toward rho = 0.05: the mean code
// activation on the training data ends within 0.02 of rho.
func TestKLSparsityReachesTarget(t *testing.T) {
	d := digits(t)
	m, err := New(Config{Inputs: 64, Hidden: []int{64}, Latent: 32, CodeActivation: layers.Sigmoid,
		Sparsity: Sparsity{Kind: KLSparsity, Weight: 1, Target: 0.05}, Rate: 3e-3, Seed: 3})
	require.NoError(t, err)
	_, err = m.Train(context.Background(), d, nil, train.Config{Epochs: 40, BatchSize: 64})
	require.NoError(t, err)
	codes, err := m.Encode(d.X, d.Rows)
	require.NoError(t, err)
	var mean float64
	for _, v := range codes {
		mean += float64(v)
	}
	mean /= float64(len(codes))
	t.Logf("mean code activation %.4f (target 0.05)", mean)
	require.InDelta(t, 0.05, mean, 0.02)
}

func accuracy(t testing.TB, m *Model, d *data.Dataset) float64 {
	pred, _, err := m.Classify(d.X, d.Rows)
	require.NoError(t, err)
	ok := 0
	for i, p := range pred {
		if p == d.Labels[i] {
			ok++
		}
	}
	return float64(ok) / float64(d.Rows)
}

// Semi-supervised: an encoder pretrained on every training row (labels
// unused), reused under a small head and fine-tuned on the 10% of rows that
// keep their labels, beats the same network trained from scratch on those
// rows alone, on held-out accuracy. Measured over seeds 4-7 before fixing
// seed 4: pretrained 0.911-0.924, scratch 0.876-0.905.
func TestPretrainedEncoderHelpsWithFewLabels(t *testing.T) {
	d := digits(t)
	rng := rand.New(rand.NewPCG(9, 9))
	trainSet, test, err := d.Split(0.3, rng)
	require.NoError(t, err)
	var labelled []int
	for i := 0; i < trainSet.Rows; i++ {
		if i%10 == 0 {
			labelled = append(labelled, i)
		}
	}
	few := trainSet.Subset(labelled)
	base := Config{Inputs: 64, Hidden: []int{32}, Latent: 32, Rate: 3e-3, Seed: 4}
	pre, err := New(base)
	require.NoError(t, err)
	_, err = pre.Train(context.Background(), trainSet, nil, train.Config{Epochs: 60, BatchSize: 32})
	require.NoError(t, err)

	headCfg := base
	headCfg.Classes, headCfg.HeadOnly = 10, true
	reuse := headCfg
	reuse.Encoder = pre.Encoder
	tuned, err := New(reuse)
	require.NoError(t, err)
	tuned.Scaler = pre.Scaler // the encoder expects the pretraining scale
	require.Equal(t, pre.Encoder.Params()[0].Values(), tuned.Encoder.Params()[0].Values())
	_, err = tuned.Train(context.Background(), few, nil, train.Config{Epochs: 150, BatchSize: 32})
	require.NoError(t, err)

	scratch, err := New(headCfg)
	require.NoError(t, err)
	_, err = scratch.Train(context.Background(), few, nil, train.Config{Epochs: 150, BatchSize: 32})
	require.NoError(t, err)
	a, b := accuracy(t, tuned, test), accuracy(t, scratch, test)
	t.Logf("held-out accuracy with %d labelled rows: pretrained encoder + head %.3f, from scratch %.3f", few.Rows, a, b)
	require.Greater(t, a, b)
}

// Partly labelled rows train jointly: unlabelled rows add only the
// reconstruction term, and the head still learns from the labelled ones.
func TestPartialLabelsTrainJointly(t *testing.T) {
	d := digits(t)
	part := d.Subset(func() []int {
		idx := make([]int, d.Rows)
		for i := range idx {
			idx[i] = i
		}
		return idx
	}())
	for i := range part.Labels {
		if i%4 != 0 {
			part.Labels[i] = data.Unlabelled
		}
	}
	m, err := New(Config{Inputs: 64, Hidden: []int{32}, Latent: 16, Classes: 10, Rate: 3e-3, Seed: 8})
	require.NoError(t, err)
	h, err := m.Train(context.Background(), part, nil, train.Config{Epochs: 30, BatchSize: 64})
	require.NoError(t, err)
	require.Equal(t, []string{"loss", "reconstruction", "classification"}, names(h.Epochs[0].Train))
	acc := accuracy(t, m, d)
	t.Logf("accuracy with a quarter of the labels: %.3f", acc)
	require.Greater(t, acc, 0.8)
}

func names(ms []train.Metric) []string {
	var s []string
	for _, m := range ms {
		s = append(s, m.Name)
	}
	return s
}

// A frozen reused encoder stays bitwise unchanged while its new head trains.
func TestFrozenEncoderUnchanged(t *testing.T) {
	d := digits(t)
	pre, err := New(Config{Inputs: 64, Hidden: []int{16}, Latent: 8, Seed: 1})
	require.NoError(t, err)
	_, err = pre.Train(context.Background(), d, nil, train.Config{Epochs: 2})
	require.NoError(t, err)
	m, err := New(Config{Inputs: 64, Hidden: []int{16}, Latent: 8, Classes: 10, HeadOnly: true, Encoder: pre.Encoder, FreezeEncoder: true, Seed: 2})
	require.NoError(t, err)
	m.Scaler = pre.Scaler
	var before [][]float64
	for _, p := range m.Encoder.Params() {
		before = append(before, p.Values())
	}
	head0 := m.Head.Params()[0].Values()
	_, err = m.Train(context.Background(), d, nil, train.Config{Epochs: 3})
	require.NoError(t, err)
	for i, p := range m.Encoder.Params() {
		require.Equal(t, before[i], p.Values(), p.Name())
	}
	require.NotEqual(t, head0, m.Head.Params()[0].Values())
	_, err = New(Config{Inputs: 64, Hidden: []int{16}, Latent: 9, Encoder: pre.Encoder})
	require.ErrorIs(t, err, ErrConfig)
}
