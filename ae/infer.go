package ae

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/kernel/vec"
	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/internal/scratch"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"

	"github.com/chewxy/math32"
)

// work is one goroutine's scratch space for graph-free inference.
type work struct {
	ws      layers.Workspace
	ws2     layers.Workspace
	in32    []float32
	out32   []float32
	code32  []float32
	scratch []float32
}

func checkRows(x []float32, rows, cols int, what string) error {
	if err := data.CheckRows(x, rows, cols, what); err != nil {
		return fmt.Errorf("ae: %w", err)
	}
	return nil
}

// scaled copies x into w.in32 and applies the scaler.
func (m *Model) scaled(w *work, x []float32) []float32 {
	w.in32 = scratch.Grow(w.in32, len(x))
	copy(w.in32, x)
	if m.Scaler != nil {
		m.Scaler.ApplyRows(w.in32)
	}
	return w.in32
}

// Encode maps raw rows (Inputs columns each) to their codes (Latent
// columns each).
func (m *Model) Encode(x []float32, rows int) ([]float32, error) { return m.EncodeInto(nil, x, rows) }

// EncodeInto is Encode writing into dst (grown if too short). With dst
// large enough it allocates nothing in steady state (float32 models).
func (m *Model) EncodeInto(dst, x []float32, rows int) ([]float32, error) {
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	out, err := layers.Run(m.Encoder, m.scaled(w, x), rows, &w.ws, dst)
	if err == nil {
		err = modelio.Finite(Kind, "code", out, m.cfg.Latent)
	}
	return out, err
}

// Decode maps codes back to raw-space rows.
func (m *Model) Decode(z []float32, rows int) ([]float32, error) { return m.DecodeInto(nil, z, rows) }

// DecodeInto is Decode writing into dst (grown if too short); no
// allocation in steady state for float32 models.
func (m *Model) DecodeInto(dst, z []float32, rows int) ([]float32, error) {
	if err := checkRows(z, rows, m.cfg.Latent, "code"); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	out, err := layers.Run(m.Decoder, z, rows, &w.ws, dst)
	if err != nil {
		return nil, err
	}
	m.finishOutput(out)
	if m.Scaler != nil {
		m.Scaler.InvertRows(out)
	}
	return out, modelio.Finite(Kind, "decoded row", out, m.cfg.Inputs)
}

// finishOutput applies the output link: a sigmoid for BCE models, a
// softmax over each category's levels (scaled like the inputs, so that
// the reconstruction is in scaled space throughout).
func (m *Model) finishOutput(out []float32) {
	if m.cfg.Loss == BCE {
		for i, v := range out {
			out[i] = float32(layers.Sigmoid.Eval(float64(v), 0))
		}
	}
	if cats := m.cfg.Categories; len(cats) > 0 {
		cols := m.cfg.Inputs
		data.SoftmaxSpans(out, cols, cats)
		if s := m.Scaler; s != nil && len(s.Offset) == cols {
			for r := 0; r+cols <= len(out); r += cols {
				for _, sp := range cats {
					for j := sp[0]; j < sp[1]; j++ {
						out[r+j] = float32((float64(out[r+j]) - s.Offset[j]) * s.Factor[j])
					}
				}
			}
		}
	}
}

// reconstructScaled returns the scaled input and the scaled-space
// reconstruction (probabilities for BCE models), in w's buffers.
func (m *Model) reconstructScaled(w *work, x []float32, rows int) (in, out []float32, err error) {
	in, out, err = m.reconstructLogits(w, x, rows)
	if err != nil {
		return nil, nil, err
	}
	m.finishOutput(out)
	return in, out, nil
}

// reconstructLogits is reconstructScaled without the output link: the
// decoder's logits for BCE models (what the training loss reads).
func (m *Model) reconstructLogits(w *work, x []float32, rows int) (in, out []float32, err error) {
	in = m.scaled(w, x)
	w.code32, err = layers.Run(m.Encoder, in, rows, &w.ws, w.code32)
	if err != nil {
		return nil, nil, err
	}
	w.out32, err = layers.Run(m.Decoder, w.code32, rows, &w.ws2, w.out32)
	if err != nil {
		return nil, nil, err
	}
	return in, w.out32, nil
}

// reconstructRows checks raw rows and reconstructs them (see
// reconstructScaled) in a workspace the caller gives back to the pool.
func (m *Model) reconstructRows(x []float32, rows int) (w *work, in, out []float32, err error) {
	return m.reconstructRowsAs(x, rows, false)
}

// reconstructRowsAs is reconstructRows returning the logits of a BCE
// model when logits is set.
func (m *Model) reconstructRowsAs(x []float32, rows int, logits bool) (w *work, in, out []float32, err error) {
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, nil, nil, err
	}
	w = m.pool.Get()
	reconstruct := m.reconstructScaled
	if logits {
		reconstruct = m.reconstructLogits
	}
	if in, out, err = reconstruct(w, x, rows); err != nil {
		m.pool.Put(w)
		return nil, nil, nil, err
	}
	return w, in, out, nil
}

// Reconstruct returns the model's reconstruction of raw rows, in raw space.
func (m *Model) Reconstruct(x []float32, rows int) ([]float32, error) {
	return m.ReconstructInto(nil, x, rows)
}

// ReconstructInto is Reconstruct writing into dst (grown if too short).
func (m *Model) ReconstructInto(dst, x []float32, rows int) ([]float32, error) {
	w, _, out, err := m.reconstructRows(x, rows)
	if err != nil {
		return nil, err
	}
	defer m.pool.Put(w)
	dst = scratch.Grow(dst, len(out))
	copy(dst, out)
	if m.Scaler != nil {
		m.Scaler.InvertRows(dst)
	}
	return dst, modelio.Finite(Kind, "reconstruction", dst, m.cfg.Inputs)
}

// Contributions returns, for each row and column, that column's part in
// the row's score. With a Profile it is the column's part of the
// residual distance, times Weight/(Latent+Inputs), plus its part of the
// input distance, times (1-Weight)/Inputs (see Profile): either part can
// be negative under a full covariance, and the code's part of the score
// is the rest. Without one it is the column's
// reconstruction error in scaled space: the squared error for MSE models,
// the binary cross-entropy for BCE models (from the decoder's logits, as
// the training loss has it, in float32: max(z,0) - z y + log(1+e^-|z|)),
// and a row's score is the mean of its row here.
func (m *Model) Contributions(x []float32, rows int) ([]float64, error) {
	return m.ContributionsInto(nil, x, rows)
}

// ContributionsInto is Contributions writing into dst (grown if too
// short); no allocation in steady state for float32 models.
func (m *Model) ContributionsInto(dst []float64, x []float32, rows int) ([]float64, error) {
	if m.Profile != nil {
		if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
			return nil, err
		}
		dst = scratch.Grow(dst, rows*m.cfg.Inputs)
		_, err := m.profileScores(nil, dst, nil, x, rows)
		return dst, err
	}
	w, in, out, err := m.reconstructRowsAs(x, rows, m.cfg.Loss == BCE)
	if err != nil {
		return nil, err
	}
	defer m.pool.Put(w)
	dst = scratch.Grow(dst, len(in))
	for i := range in {
		dst[i] = m.elemError(in[i], out[i])
	}
	return dst, nil
}

// Departures is Contributions less what each value would cost if the
// decoder gave it back exactly: for a BCE model (images, by default) the
// binary cross-entropy less the grey level's own entropy
// (losses.BinaryEntropy), so that a grey pixel given back exactly counts
// for nothing; for other models it is Contributions.
func (m *Model) Departures(x []float32, rows int) ([]float64, error) {
	c, err := m.Contributions(x, rows)
	if err != nil || m.cfg.Loss != BCE || m.Profile != nil {
		return c, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	for i, v := range m.scaled(w, x) {
		c[i] = max(c[i]-losses.BinaryEntropy(float64(v)), 0)
	}
	return c, nil
}

// elemError is one value's reconstruction error: the squared error, or
// for BCE models the binary cross-entropy of the target under the logit.
func (m *Model) elemError(target, out float32) float64 {
	if m.cfg.Loss == BCE {
		return bceLogit(out, target)
	}
	d := float64(target) - float64(out)
	return d * d
}

// bceLogit is the binary cross-entropy of target y under logit z, in
// float32: max(z,0) - z y + log(1 + e^-|z|), finite for every finite z.
func bceLogit(z, y float32) float64 {
	return float64(max(z, 0) - z*y + vec.Log1pExpNeg32(math32.Abs(z)))
}

// RowErrors returns each row's mean reconstruction error in scaled space
// (the anomaly score of a model without a Profile).
func (m *Model) RowErrors(x []float32, rows int) ([]float64, error) {
	return m.RowErrorsInto(nil, x, rows)
}

// RowScores returns each row's anomaly score, the value Score compares
// with the threshold: the profile distance for a model with a Profile,
// RowErrors for one without.
func (m *Model) RowScores(x []float32, rows int) ([]float64, error) {
	return m.RowScoresInto(nil, x, rows)
}

// RowScoresInto is RowScores writing into dst (grown if too short).
func (m *Model) RowScoresInto(dst []float64, x []float32, rows int) ([]float64, error) {
	if m.Profile != nil {
		return m.profileScores(dst, nil, nil, x, rows)
	}
	return m.RowErrorsInto(dst, x, rows)
}

// RowErrorsInto is RowErrors writing into dst (grown if too short) and
// returning it: with a dst of rows entries it allocates nothing in steady
// state, for hot scoring paths.
func (m *Model) RowErrorsInto(dst []float64, x []float32, rows int) ([]float64, error) {
	w, in, out, err := m.reconstructRowsAs(x, rows, m.cfg.Loss == BCE)
	if err != nil {
		return nil, err
	}
	defer m.pool.Put(w)
	dst = scratch.Grow(dst, rows)
	cols := m.cfg.Inputs
	for r := range dst {
		var t float64
		if m.cfg.Loss == BCE {
			for j := r * cols; j < (r+1)*cols; j++ {
				t += bceLogit(out[j], in[j])
			}
		} else {
			a, o := in[r*cols:(r+1)*cols], out[r*cols:(r+1)*cols]
			o = o[:len(a)]
			for j, v := range a {
				e := float64(v) - float64(o[j])
				t += e * e
			}
		}
		dst[r] = t / float64(cols)
	}
	return dst, nil
}

// Feature is one column's part in a score.
type Feature = anomaly.Feature

// Score is one row's anomaly assessment.
type Score = anomaly.Score

// Caution is the notice to show with scores.
const Caution = anomaly.Caution

// Score scores raw rows against the model's calibrated threshold and names
// the top features (at most top, default 3) behind each score. A row with
// a category level never seen in training is flagged whatever its score
// (Score.Unseen names the column).
func (m *Model) Score(x []float32, rows, top int) ([]Score, error) {
	if m.Threshold == nil {
		return nil, fmt.Errorf("ae: model has no threshold; calibrate it first")
	}
	if top <= 0 {
		top = 3
	}
	cols := m.cfg.Inputs
	var scores, c []float64
	var recon []float32
	var err error
	if m.Profile != nil {
		if err := checkRows(x, rows, cols, "input"); err != nil {
			return nil, err
		}
		c = make([]float64, rows*cols)
		recon = make([]float32, rows*cols)
		scores, err = m.profileScores(nil, c, recon, x, rows)
	} else if c, err = m.Contributions(x, rows); err == nil {
		scores = make([]float64, rows)
		for r := range scores {
			var total float64
			for _, v := range c[r*cols : (r+1)*cols] {
				total += v
			}
			scores[r] = total / float64(cols)
		}
	}
	if err != nil {
		return nil, err
	}
	owner, names := m.Explained()
	out := anomaly.AssessGrouped(scores, c, cols, owner, names, top, *m.Threshold)
	if recon == nil {
		if recon, err = m.Reconstruct(x, rows); err != nil {
			return nil, err
		}
	}
	modelio.Explain(&m.Fitted, out, x, recon, cols)
	modelio.FlagUnseen(&m.Fitted, out, x, cols)
	return out, nil
}

// Calibrated returns the model's threshold (nil before calibration).
func (m *Model) Calibrated() *anomaly.Threshold { return m.Threshold }

// ScoreName names what RowScores measure: "distance score" with a
// Profile ("input distance score" when its Weight is 0), else
// "reconstruction error".
func (m *Model) ScoreName() string {
	switch {
	case m.Profile != nil && m.Profile.Weight == 0:
		return "input distance score"
	case m.Profile != nil:
		return "distance score"
	}
	return "reconstruction error"
}

// Calibrate sets the model's threshold from held-out normal rows (not used
// for training) and returns it.
//
// Calibrate changes the model: it must not run while other goroutines use
// it (scoring, encoding and the rest are safe for concurrent use only
// among themselves).
func (m *Model) Calibrate(normal []float32, rows int, c anomaly.Config) (anomaly.Threshold, error) {
	th, err := anomaly.CalibrateRows(m.RowScores, normal, rows, c)
	if err != nil {
		return th, err
	}
	m.Threshold = &th
	return th, nil
}

// Classify returns the most likely class of each raw row and the class
// probabilities (rows x Classes). The model needs a head.
func (m *Model) Classify(x []float32, rows int) ([]int, []float64, error) {
	if m.Head == nil {
		return nil, nil, fmt.Errorf("ae: model has no classification head")
	}
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	var err error
	w.code32, err = layers.Run(m.Encoder, m.scaled(w, x), rows, &w.ws, w.code32)
	if err != nil {
		return nil, nil, err
	}
	w.scratch, err = layers.Run(m.Head, w.code32, rows, &w.ws2, w.scratch)
	if err != nil {
		return nil, nil, err
	}
	k := m.cfg.Classes
	probs := make([]float64, rows*k)
	labels := make([]int, rows)
	for r := 0; r < rows; r++ {
		lg := w.scratch[r*k : (r+1)*k]
		mx := math.Inf(-1)
		for j, v := range lg {
			if float64(v) > mx {
				mx, labels[r] = float64(v), j
			}
		}
		var z float64
		for j, v := range lg {
			probs[r*k+j] = math.Exp(float64(v) - mx)
			z += probs[r*k+j]
		}
		for j := range lg {
			probs[r*k+j] /= z
		}
	}
	return labels, probs, nil
}
