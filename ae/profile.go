package ae

import (
	"fmt"
	"slices"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/scratch"
)

// Profile is what a model learnt of its normal rows beyond the weights:
// Gaussians (each with a Ledoit-Wolf shrunk covariance) of their codes,
// of their reconstruction residuals (scaled input minus reconstruction)
// and of the scaled rows themselves. With a profile a row's score is the
// average of two standardised distances from normal:
//
//	w (d_code + d_residual) / (Latent + n) + (1 - w) d_input / n
//
// with d the squared Mahalanobis distances, n the number of inputs scored
// (Scored) and w = Weight, so that rows
// like the training rows score around 1 (a little under on average: the
// shrinkage widens the Gaussians).
//
// The autoencoder's part measures how unusual a row is on the data's own
// manifold (the code) and how far it lies off it (the residual): for a
// linear model the two add up to the Gaussian log-density of
// probabilistic PCA (Tipping and Bishop, "Probabilistic principal
// component analysis", J. Royal Statistical Society B 61, 1999); fitting a
// Gaussian to reconstruction errors is the score of Malhotra et al.
// ("LSTM-based encoder-decoder for multi-sensor anomaly detection", 2016).
// The input part is the plain shrunk-covariance distance. Averaging
// standardised scores of different detectors is the combination studied by
// Aggarwal and Sathe ("Theoretical foundations and algorithms for outlier
// ensembles", SIGKDD Explorations 17, 2015): the autoencoder wins where
// the data are curved and plentiful, the Gaussian on small, nearly linear
// tables, and the average was the best of the variants tried on the open
// panel (bench/panel.sh, README). Profiles apply to MSE models (tables);
// BCE models (images) keep the mean reconstruction error.
type Profile struct {
	Code     *anomaly.Gaussian `json:"code"`
	Residual *anomaly.Gaussian `json:"residual"`
	Input    *anomaly.Gaussian `json:"input"`
	// Weight is the autoencoder part's weight w in [0, 1].
	Weight float64 `json:"autoencoder_weight"`
	// Scored lists the inputs the residual and input parts cover, in
	// order; nil means every input. A table's missing-cell indicators are
	// left out (data.Encoding.Indicators): a missing cell says nothing of
	// how unusual the row is, and a rare indicator, standardised, would
	// dominate the distance. For the same reason a missing cell's
	// residual counts as 0 (the training loss leaves it out too), and its
	// input is the fill, the training median.
	Scored []int `json:"scored_inputs,omitempty"`
}

// missingGroups are the model's table's missing-cell indicators (nil:
// none).
func (m *Model) missingGroups() []data.MissingGroup {
	if m.Encoding == nil || m.Encoding.Width() != m.cfg.Inputs {
		return nil
	}
	return m.Encoding.MissingGroups()
}

// maskResidual zeroes the residual of a row's missing cells (raw row x):
// the training loss leaves them out, so the network's output there says
// nothing, and the profile takes them as no error.
func maskResidual(resid, x []float32, groups []data.MissingGroup) {
	for _, g := range groups {
		if x[g.Indicator] >= 0.5 {
			clear(resid[g.From:g.To])
		}
	}
}

// scoredInputs are the inputs a profile fitted now covers: all but a
// table's missing-cell indicators (nil: all).
func (m *Model) scoredInputs() []int {
	if m.Encoding == nil {
		return nil
	}
	ind := m.Encoding.Indicators()
	if len(ind) != m.cfg.Inputs {
		return nil
	}
	var out []int
	for j, is := range ind {
		if !is {
			out = append(out, j)
		}
	}
	if len(out) == m.cfg.Inputs {
		return nil
	}
	return out
}

// gather writes v's scored inputs into dst (grown) and returns it; v
// itself when every input is scored.
func gather(dst []float32, v []float32, scored []int) []float32 {
	if scored == nil {
		return v
	}
	dst = dst[:0]
	for _, j := range scored {
		dst = append(dst, v[j])
	}
	return dst
}

// DefaultProfileWeight is the autoencoder part's default weight.
const DefaultProfileWeight = 0.5

// ProfileSettings configure FitProfileWith. The zero value fits every
// part on the rows given, with the default weight.
type ProfileSettings struct {
	// Residual, when set, is the residual part fitted elsewhere: with
	// anomaly.FitGaussian on the Residuals of rows the model (or models
	// trained like it) did not see. A model's residuals on its own
	// training rows are smaller than on new rows, the more so the fewer
	// the rows.
	Residual *anomaly.Gaussian
	// InputOnly gives the autoencoder part no weight: the score is the
	// input distance alone (for tables too small to learn a model from).
	InputOnly bool
}

// profileChunk is the number of rows the profile fits run through the
// networks at once.
const profileChunk = 4096

// FitProfile fits the model's Profile to normal rows (the training rows)
// and sets it: from then on RowScores, Score, Contributions and Calibrate
// use the profile's distance. Calibrate again after it. Like Calibrate it
// changes the model: it must not run while other goroutines use it.
func (m *Model) FitProfile(x []float32, rows int) error {
	return m.FitProfileWith(x, rows, ProfileSettings{})
}

// FitProfileWith is FitProfile with settings.
func (m *Model) FitProfileWith(x []float32, rows int, s ProfileSettings) error {
	if m.cfg.Loss == BCE {
		return fmt.Errorf("ae: BCE models score by their reconstruction error: %w", anomaly.ErrNoProfile)
	}
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return err
	}
	d, k := m.cfg.Inputs, m.cfg.Latent
	scored := m.scoredInputs()
	ds := d
	if scored != nil {
		ds = len(scored)
	}
	if s.Residual != nil {
		if s.Residual.Width() != ds {
			return fmt.Errorf("ae: a residual Gaussian of width %d for a model that scores %d inputs", s.Residual.Width(), ds)
		}
		if err := s.Residual.Check(); err != nil {
			return fmt.Errorf("ae: %w", err)
		}
	}
	code, err := anomaly.NewGaussianFit(k)
	if err != nil {
		return err
	}
	res, err := anomaly.NewGaussianFit(ds)
	if err != nil {
		return err
	}
	input, err := anomaly.NewGaussianFit(ds)
	if err != nil {
		return err
	}
	resid := make([]float32, d)
	var buf []float32
	groups := m.missingGroups()
	pass := func(first bool) error {
		for lo := 0; lo < rows; lo += profileChunk {
			hi := min(lo+profileChunk, rows)
			w, in, out, err := m.reconstructRows(x[lo*d:hi*d], hi-lo)
			if err != nil {
				return err
			}
			for r := range hi - lo {
				add := func(f *anomaly.GaussianFit, v []float32) {
					if first {
						f.AddMean(v)
					} else {
						f.AddScatter(v)
					}
				}
				add(code, w.code32[r*k:(r+1)*k])
				buf = gather(buf, in[r*d:(r+1)*d], scored)
				add(input, buf)
				if s.Residual == nil {
					for j := range resid {
						resid[j] = in[r*d+j] - out[r*d+j]
					}
					maskResidual(resid, x[(lo+r)*d:(lo+r+1)*d], groups)
					buf = gather(buf, resid, scored)
					add(res, buf)
				}
			}
			m.pool.Put(w)
		}
		return nil
	}
	if err := pass(true); err != nil {
		return err
	}
	if err := pass(false); err != nil {
		return err
	}
	p := &Profile{Residual: s.Residual, Weight: DefaultProfileWeight, Scored: scored}
	if s.InputOnly {
		p.Weight = 0
	}
	if p.Code, err = code.Gaussian(); err != nil {
		return fmt.Errorf("ae: profile of the codes: %w", err)
	}
	if p.Input, err = input.Gaussian(); err != nil {
		return fmt.Errorf("ae: profile of the rows: %w", err)
	}
	if s.Residual == nil {
		if p.Residual, err = res.Gaussian(); err != nil {
			return fmt.Errorf("ae: profile of the residuals: %w", err)
		}
	}
	m.Profile = p
	return nil
}

// Residuals returns each raw row's reconstruction residual in scaled
// space (scaled input minus reconstruction), what the residual part of a
// Profile describes: rows x the inputs a profile scores (every input but
// a table's missing-cell indicators; see Profile.Scored). MSE models
// only.
func (m *Model) Residuals(x []float32, rows int) ([]float32, error) {
	if m.cfg.Loss == BCE {
		return nil, fmt.Errorf("ae: BCE models score by their reconstruction error: %w", anomaly.ErrNoProfile)
	}
	w, in, out, err := m.reconstructRows(x, rows)
	if err != nil {
		return nil, err
	}
	defer m.pool.Put(w)
	d := m.cfg.Inputs
	scored := m.scoredInputs()
	if scored == nil {
		r := make([]float32, len(in))
		for i := range r {
			r[i] = in[i] - out[i]
		}
		return r, nil
	}
	r := make([]float32, 0, rows*len(scored))
	groups := m.missingGroups()
	resid := make([]float32, d)
	for i := range rows {
		for j := range resid {
			resid[j] = in[i*d+j] - out[i*d+j]
		}
		maskResidual(resid, x[i*d:(i+1)*d], groups)
		for _, j := range scored {
			r = append(r, resid[j])
		}
	}
	return r, nil
}

// check reports whether a profile read from a file fits the model.
func (p *Profile) check(c Config) error {
	if p.Code == nil || p.Residual == nil || p.Input == nil {
		return fmt.Errorf("ae: a profile without its code, residual or input part")
	}
	ds := c.Inputs
	if p.Scored != nil {
		ds = len(p.Scored)
		for i, j := range p.Scored {
			if j < 0 || j >= c.Inputs || (i > 0 && j <= p.Scored[i-1]) {
				return fmt.Errorf("ae: a profile's scored inputs %v are not increasing inputs of %d", p.Scored, c.Inputs)
			}
		}
		if ds == 0 {
			return fmt.Errorf("ae: a profile that scores no input")
		}
	}
	for _, g := range []struct {
		what string
		g    *anomaly.Gaussian
		want int
	}{{"codes", p.Code, c.Latent}, {"residuals", p.Residual, ds}, {"rows", p.Input, ds}} {
		if err := g.g.Check(); err != nil {
			return fmt.Errorf("ae: profile of the %s: %w", g.what, err)
		}
		if g.g.Width() != g.want {
			return fmt.Errorf("ae: a profile of the %s %d wide for a model that makes them %d wide", g.what, g.g.Width(), g.want)
		}
	}
	if !(p.Weight >= 0 && p.Weight <= 1) {
		return fmt.Errorf("ae: a profile weight of %v (want 0 to 1)", p.Weight)
	}
	if c.Loss == BCE {
		return fmt.Errorf("ae: a profile in a BCE model")
	}
	return nil
}

// profileScores writes each row's profile distance into dst and, when
// contrib is not nil, each column's part of it into contrib (rows x
// Inputs): its residual term times w / (Latent + Inputs) plus its input
// term times (1 - w) / Inputs. The code's part is the rest. When recon
// is not nil it also receives the raw reconstruction (rows x Inputs), as
// Reconstruct gives it.
func (m *Model) profileScores(dst, contrib []float64, recon, x []float32, rows int) ([]float64, error) {
	w, in, out, err := m.reconstructRows(x, rows)
	if err != nil {
		return nil, err
	}
	defer m.pool.Put(w)
	if recon != nil {
		// the raw reconstruction, as Reconstruct gives it
		copy(recon, out)
		if m.Scaler != nil {
			m.Scaler.InvertRows(recon)
		}
	}
	d, k := m.cfg.Inputs, m.cfg.Latent
	p := m.Profile
	ds := d
	if p.Scored != nil {
		ds = len(p.Scored)
	}
	dst = scratch.Grow(dst, rows)
	w.scratch = scratch.Grow(w.scratch, d+ds)
	resid, buf := w.scratch[:d], w.scratch[d:d]
	var terms, tmp []float64
	groups := m.missingGroups()
	wa := p.Weight / float64(ds+k)
	wi := (1 - p.Weight) / float64(ds)
	// at maps a scored input's place to the input (itself when all are)
	at := func(j int) int {
		if p.Scored == nil {
			return j
		}
		return p.Scored[j]
	}
	for r := range rows {
		row := in[r*d : (r+1)*d]
		var di, dc, dr float64
		if contrib != nil && p.Scored != nil {
			clear(contrib[r*d : (r+1)*d])
		}
		di, terms, tmp = p.Input.Distance(terms, tmp, gather(buf, row, p.Scored))
		if contrib != nil {
			for j, t := range terms {
				contrib[r*d+at(j)] = t * wi
			}
		}
		if p.Weight > 0 {
			dc, terms, tmp = p.Code.Distance(terms, tmp, w.code32[r*k:(r+1)*k])
			for j := range resid {
				resid[j] = row[j] - out[r*d+j]
			}
			maskResidual(resid, x[r*d:(r+1)*d], groups)
			dr, terms, tmp = p.Residual.Distance(terms, tmp, gather(buf, resid, p.Scored))
			if contrib != nil {
				for j, t := range terms {
					contrib[r*d+at(j)] += t * wa
				}
			}
		}
		dst[r] = (dc+dr)*wa + di*wi
	}
	return dst, nil
}

// SetThreshold sets the model's threshold to one calibrated elsewhere (by
// cross-fitting, say). Like Calibrate it changes the model.
func (m *Model) SetThreshold(t anomaly.Threshold) { m.Threshold = &t }

// compact copies the profile's slices to their lengths: JSON decoding
// grows them by doubling, and a server of ten thousand models holds all
// of them (the precision matrices are most of a served model's memory).
func (p *Profile) compact() {
	for _, g := range []*anomaly.Gaussian{p.Code, p.Residual, p.Input} {
		if g != nil {
			g.Mean, g.Precision, g.Variance = slices.Clone(g.Mean), slices.Clone(g.Precision), slices.Clone(g.Variance)
		}
	}
	p.Scored = slices.Clone(p.Scored)
}
