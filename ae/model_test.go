package ae

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"sync"
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

func trainedBC(t testing.TB) (*Model, *data.Dataset) {
	bc := breastCancer(t)
	m, err := New(Config{Inputs: 30, Hidden: []int{16}, Latent: 4, Seed: 1})
	require.NoError(t, err)
	_, err = m.Train(context.Background(), bc, nil, train.Config{Epochs: 5})
	require.NoError(t, err)
	return m, bc
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

func TestCalibrateAndScore(t *testing.T) {
	bc := breastCancer(t)
	fit, test, pos := anomalySplit(bc, 1)
	// hold out part of the normal rows for calibration
	var trIdx, calIdx []int
	for i := 0; i < fit.Rows; i++ {
		if i%3 == 0 {
			calIdx = append(calIdx, i)
		} else {
			trIdx = append(trIdx, i)
		}
	}
	tr, cal := fit.Subset(trIdx), fit.Subset(calIdx)
	m, err := New(Config{Inputs: 30, Hidden: []int{16}, Latent: 4, Activation: layers.Tanh, Rate: 3e-3, WeightDecay: 1e-3, Seed: 1})
	require.NoError(t, err)
	_, err = m.Train(context.Background(), tr, nil, train.Config{Epochs: 100, BatchSize: 32})
	require.NoError(t, err)
	_, err = m.Score(test.X, test.Rows, 3)
	require.ErrorContains(t, err, "no threshold")
	mx, err := m.Calibrate(cal.X, cal.Rows, anomaly.Config{Method: anomaly.Max})
	require.NoError(t, err)
	require.InDelta(t, 1/float64(cal.Rows+1), mx.ExpectedFalseAlarm, 1e-12)
	th, err := m.Calibrate(cal.X, cal.Rows, anomaly.Config{FalseAlarm: 0.05})
	require.NoError(t, err)
	require.LessOrEqual(t, th.ExpectedFalseAlarm, 0.05)
	require.LessOrEqual(t, th.Value, mx.Value)
	scores, err := m.Score(test.X, test.Rows, 3)
	require.NoError(t, err)
	s := make([]float64, len(scores))
	var flaggedNormal, normal int
	for i, sc := range scores {
		s[i] = sc.Value
		require.Len(t, sc.Top, 3)
		require.GreaterOrEqual(t, sc.Top[0].Share, sc.Top[1].Share)
		require.Equal(t, "c"+itoa2(sc.Top[0].Column), sc.Top[0].Name)
		require.Equal(t, sc.Value > th.Value, sc.Anomaly)
		if !pos[i] {
			normal++
			if sc.Anomaly {
				flaggedNormal++
			}
		}
	}
	prec, rec, err := anomaly.PrecisionRecall(s, pos, th.Value)
	require.NoError(t, err)
	t.Logf("5%% false-alarm threshold: precision %.3f recall %.3f, normal rows flagged %d/%d", prec, rec, flaggedNormal, normal)
	require.Greater(t, prec, 0.8)
	require.Greater(t, rec, 0.5)
}

func itoa2(n int) string {
	s := ""
	if n == 0 {
		return "0"
	}
	for n > 0 {
		s = string(rune('0'+n%10)) + s
		n /= 10
	}
	return s
}

func TestEarlyStoppingThroughAE(t *testing.T) {
	bc := breastCancer(t)
	tr, va, err := bc.Split(0.2, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	m, err := New(Config{Inputs: 30, Hidden: []int{64}, Latent: 16, Rate: 1e-2, Seed: 2})
	require.NoError(t, err)
	h, err := m.Train(context.Background(), tr, va, train.Config{Epochs: 200, BatchSize: 16, Patience: 5})
	require.NoError(t, err)
	require.True(t, h.StoppedEarly)
	require.Less(t, len(h.Epochs), 200)
	require.Equal(t, "reconstruction", h.Epochs[0].Validation[1].Name)
	// the restored weights give the best validation loss again
	ms, err := trainee{m}.Evaluate(mustScale(t, m, va))
	require.NoError(t, err)
	require.InDelta(t, h.BestLoss, ms[0].Value, 1e-6)
}

func mustScale(t testing.TB, m *Model, d *data.Dataset) *data.Dataset {
	s, err := m.Scaler.Apply(d)
	require.NoError(t, err)
	return s
}

func TestDivergenceIsATypedError(t *testing.T) {
	bc := breastCancer(t)
	m, err := New(Config{Inputs: 30, Hidden: []int{16}, Latent: 4, Rate: 1e6, Scaling: data.ScaleNone, Seed: 1})
	require.NoError(t, err)
	_, err = m.Train(context.Background(), bc, nil, train.Config{Epochs: 50})
	var nf *train.NonFiniteError
	require.True(t, errors.As(err, &nf), "%v", err)
	require.GreaterOrEqual(t, nf.Epoch, 1)
	require.GreaterOrEqual(t, nf.Step, 1)
}

func TestSameSeedSameModel(t *testing.T) {
	run := func() ([]float64, []float64) {
		m, err := New(Config{Inputs: 30, Hidden: []int{8}, Latent: 3, Dropout: 0.1, Noise: Corruption{Kind: GaussianNoise, Level: 0.1}, Seed: 21})
		require.NoError(t, err)
		h, err := m.Train(context.Background(), breastCancer(t), nil, train.Config{Epochs: 3})
		require.NoError(t, err)
		var w []float64
		for _, p := range m.Params() {
			w = append(w, p.Values()...)
		}
		var l []float64
		for e := range h.Epochs {
			tl, _ := h.Loss(e + 1)
			l = append(l, tl)
		}
		return w, l
	}
	w1, l1 := run()
	w2, l2 := run()
	require.Equal(t, w1, w2)
	require.Equal(t, l1, l2)
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
		{Inputs: 3, Noise: Corruption{Kind: MaskingNoise, Level: 1.5}},
		{Inputs: 3, Sparsity: Sparsity{Kind: KLSparsity, Weight: 1}},
		{Inputs: 3, Classes: 1},
		{Inputs: 3, HeadOnly: true},
		{Inputs: 3, Loss: "hinge"},
		{Inputs: 3, Scaling: "log"},
	} {
		_, err := New(cfg)
		require.ErrorIs(t, err, ErrConfig, "%+v", cfg)
	}
}

func TestSaltPepperAndL1Train(t *testing.T) {
	d := digits(t)
	m, err := New(Config{Inputs: 64, Hidden: []int{16}, Latent: 8, Noise: Corruption{Kind: SaltPepperNoise, Level: 0.1}, Sparsity: Sparsity{Kind: L1Sparsity, Weight: 1e-3}, Seed: 1})
	require.NoError(t, err)
	h, err := m.Train(context.Background(), d, nil, train.Config{Epochs: 3})
	require.NoError(t, err)
	require.Equal(t, []string{"loss", "reconstruction", "sparsity"}, names(h.Epochs[0].Train))
	l1, _ := h.Loss(1)
	l3, _ := h.Loss(3)
	require.Less(t, l3, l1)
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
	if !raceBuild { // the race detector's instrumentation allocates
		require.Zero(t, testing.AllocsPerRun(50, warm))
	}
}
