package vae

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/losses"
)

// ScoreSamples is the number of reparameterised draws behind a density
// score; the draws come from a fixed seed, so a row's score is always the
// same.
const ScoreSamples = 16

// NegELBO returns each raw row's negative ELBO in nats (ScoreSamples
// draws, fixed seed): a density score whose expectation bounds -log p(x)
// from above. Rows unlike the training data score high.
func (m *Model) NegELBO(x []float32, rows int) ([]float64, error) {
	e, err := m.ELBO(x, rows, ScoreSamples, stream.ScoreSeed)
	if err != nil {
		return nil, err
	}
	for i := range e {
		e[i] = -e[i]
	}
	return e, nil
}

// Contributions returns, for each row and column, that column's
// discrepancy from its reconstruction at the posterior mean, in scaled
// space: the binary cross-entropy for Bernoulli models, the squared error
// over the likelihood's variance for Gaussian ones; in a table's
// likelihood, in nats above each column's best: half that for a number,
// a category's -log p of the row's level on that level's input (of the
// least probable level for one never seen in training), nothing for a
// missing cell. It says which columns drove a score.
func (m *Model) Contributions(x []float32, rows int) ([]float64, error) {
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	xs := m.scaled(x)
	mu, _, err := m.posterior(w, xs, rows)
	if err != nil {
		return nil, err
	}
	out, err := m.forward(&w.ws2, m.Decoder, mu, rows)
	if err != nil {
		return nil, err
	}
	c := make([]float64, len(xs))
	d := m.cfg.Inputs
	if t := m.table(); t != nil {
		for r := 0; r < rows; r++ {
			tableContributions(t, xs[r*d:(r+1)*d], out[r*d:(r+1)*d], c[r*d:(r+1)*d])
		}
		return c, nil
	}
	for i, v := range xs {
		o := out[i]
		if m.cfg.Likelihood == Bernoulli {
			c[i] = losses.BCEWithLogitsElem(o, v)
			continue
		}
		e := v - o
		c[i] = e * e * math.Exp(-m.logVarAt(i%d))
	}
	return c, nil
}

// Departures is Contributions less what each value would cost if the
// decoder gave it back exactly: for a Bernoulli model the binary
// cross-entropy less the grey level's own entropy
// (losses.BinaryEntropy), the Kullback-Leibler divergence of the
// decoder's Bernoulli from the level's, which is 0 for a value given back
// exactly; a mid-grey pixel costs its entropy however well it is
// reconstructed, and a heat map of Contributions would glow wherever an
// image is grey. For other likelihoods it is Contributions.
func (m *Model) Departures(x []float32, rows int) ([]float64, error) {
	c, err := m.Contributions(x, rows)
	if err != nil || m.cfg.Likelihood != Bernoulli || m.table() != nil {
		return c, err
	}
	for i, v := range m.scaled(x) {
		c[i] = max(c[i]-losses.BinaryEntropy(v), 0)
	}
	return c, nil
}

// Calibrate sets the model's threshold on the negative ELBO of held-out
// normal rows (not used for training) and returns it; for a model with
// missing-cell indicators it first fits MissingCost on the same rows.
//
// Calibrate changes the model: it must not run while other goroutines use
// it (scoring, encoding and the rest are safe for concurrent use only
// among themselves).
func (m *Model) Calibrate(normal []float32, rows int, c anomaly.Config) (anomaly.Threshold, error) {
	cost, err := m.missingCost(normal, rows)
	if err != nil {
		return anomaly.Threshold{}, err
	}
	// the threshold is set on scores under the new costs; on an error
	// the model keeps its old costs and threshold together
	old := m.MissingCost
	m.MissingCost = cost
	th, err := anomaly.CalibrateRows(m.NegELBO, normal, rows, c)
	if err != nil {
		m.MissingCost = old
		return th, err
	}
	m.Threshold = &th
	return th, nil
}

// Score scores raw rows by their negative ELBO against the calibrated
// threshold and names the top columns (at most top, default 3) by their
// Contributions. A row with a category level never seen in training is
// flagged whatever its score (Score.Unseen names the column).
func (m *Model) Score(x []float32, rows, top int) ([]anomaly.Score, error) {
	if m.Threshold == nil {
		return nil, fmt.Errorf("vae: model has no threshold; calibrate it first")
	}
	if top <= 0 {
		top = 3
	}
	s, err := m.NegELBO(x, rows)
	if err != nil {
		return nil, err
	}
	c, err := m.Contributions(x, rows)
	if err != nil {
		return nil, err
	}
	owner, names := m.Explained()
	out := anomaly.AssessGrouped(s, c, m.cfg.Inputs, owner, names, top, *m.Threshold)
	recon, err := m.Reconstruct(x, rows)
	if err != nil {
		return nil, err
	}
	modelio.Explain(&m.Fitted, out, x, recon, m.cfg.Inputs)
	modelio.FlagUnseen(&m.Fitted, out, x, m.cfg.Inputs)
	return out, nil
}

// ScoreName names what RowScores measure.
func (m *Model) ScoreName() string { return "negative ELBO (nats)" }

// RowScores is NegELBO: the score Score compares with the threshold.
func (m *Model) RowScores(x []float32, rows int) ([]float64, error) { return m.NegELBO(x, rows) }

// Calibrated returns the model's threshold (nil before calibration).
func (m *Model) Calibrated() *anomaly.Threshold { return m.Threshold }

// SetThreshold sets a threshold found elsewhere (from scores of rows
// streamed past the model, say). Like Calibrate, it must not run while
// other goroutines use the model.
func (m *Model) SetThreshold(t anomaly.Threshold) { m.Threshold = &t }
