package vae

import (
	"fmt"
	"math"
	"slices"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/losses"
)

// A table's likelihood. A model with Config.Table (set by Categories, and
// by the command line for a table read by type) has a row likelihood of
// the table's own kind:
//
//   - a category's levels: the log-probability of the row's level under
//     the softmax of the decoder's outputs there (a level never seen in
//     training gets the least probable level's: as surprising as the
//     model allows for that column);
//   - a boolean: Bernoulli, the decoder's output its log-odds;
//   - every other input but the missing-cell indicators: the Gaussian
//     of the model's likelihood, with the scaler's Jacobian for raw
//     units;
//   - a missing cell (its indicator set): its column's terms left out,
//     which marginalises it exactly (the decoder's columns are
//     independent given z), and MissingCost charged instead: the
//     column's mean log-likelihood on the calibration rows that have it
//     (estimated as the score is, from the same draws). A row with a
//     missing cell then scores, on average, like the same row with a
//     typical value there: not lower for having fewer terms, and not higher for the missing cell itself (the
//     indicators inform the encoder but are not scored, as in the
//     autoencoder's distance score; training leaves them out of the
//     likelihood too).

// input kinds of a table likelihood
const (
	tabGauss = iota
	tabLevel
	tabIndicator
	tabBool
)

// tableLik is a model's table likelihood, read from its configuration,
// scaler, encoding and missing costs.
type tableLik struct {
	kind  []uint8
	field []int // each input's field (-1 without an encoding)
	spans [][2]int
	// spanField is each span's field (-1 without an encoding)
	spanField []int
	// ind is each field's indicator input (-1 without one)
	ind       []int
	half      []float64 // the scaled 0.5 of each input
	lv        []float64 // each input's Gaussian log-variance
	logFactor []float64 // log |scale factor| of each input
	cost      []float64 // each field's MissingCost (0 when none)
}

// tableCache is a built table likelihood and what it was read from.
type tableCache struct {
	scaler *data.Scaler
	enc    *data.Encoding
	cost   []float64
	lv     []float64
	t      *tableLik
}

// fresh reports whether c was built from m as it is now.
func (c *tableCache) fresh(m *Model) bool {
	if c == nil || c.scaler != m.Scaler || c.enc != m.Encoding || !slices.Equal(c.cost, m.MissingCost) {
		return false
	}
	for j, v := range c.lv {
		if m.logVarAt(j) != v {
			return false
		}
	}
	return true
}

// table returns the model's table likelihood, nil when its rows are
// scored by the plain likelihood. It is built once and kept while the
// scaler, encoding, missing-cell costs and log-variances it was read from
// stay the same (the scaler and encoding by identity, the rest by value),
// so inference allocates nothing for it.
func (m *Model) table() *tableLik {
	if !m.cfg.Table {
		return nil
	}
	if c := m.tab.Load(); c.fresh(m) {
		return c.t
	}
	t := m.buildTable()
	m.tab.Store(&tableCache{scaler: m.Scaler, enc: m.Encoding, cost: slices.Clone(m.MissingCost), lv: slices.Clone(t.lv), t: t})
	return t
}

// buildTable reads the table likelihood from the model.
func (m *Model) buildTable() *tableLik {
	d := m.cfg.Inputs
	enc := m.Encoding
	if enc != nil && enc.Width() != d {
		enc = nil
	}
	t := &tableLik{kind: make([]uint8, d), field: make([]int, d), spans: m.cfg.Categories,
		half: make([]float64, d), lv: make([]float64, d), logFactor: make([]float64, d)}
	for j := range t.field {
		t.field[j] = -1
		t.half[j] = 0.5
		t.lv[j] = m.logVarAt(j)
		if m.Scaler != nil && j < len(m.Scaler.Factor) {
			t.half[j] = (0.5 - m.Scaler.Offset[j]) * m.Scaler.Factor[j]
			t.logFactor[j] = math.Log(math.Abs(m.Scaler.Factor[j]))
		}
	}
	for _, s := range t.spans {
		for k := s[0]; k < s[1]; k++ {
			t.kind[k] = tabLevel
		}
	}
	t.spanField = make([]int, len(t.spans))
	for i := range t.spanField {
		t.spanField[i] = -1
	}
	if enc != nil {
		copy(t.field, enc.Owners())
		t.ind = make([]int, len(enc.Fields))
		for i := range t.ind {
			t.ind[i] = -1
		}
		for _, g := range enc.MissingGroups() {
			t.kind[g.Indicator] = tabIndicator
			t.ind[t.field[g.Indicator]] = g.Indicator
		}
		for i, s := range t.spans {
			t.spanField[i] = t.field[s[0]]
		}
		t.cost = make([]float64, len(enc.Fields))
		copy(t.cost, m.MissingCost)
		for j, f := range t.field {
			if t.kind[j] == tabGauss && enc.Fields[f].Type == data.Boolean && m.cfg.Booleans == Bernoulli {
				t.kind[j] = tabBool
			}
		}
	}
	return t
}

// bit is a boolean input's value, 0 or 1, in the scaled row xs.
func bit[T float32 | float64](t *tableLik, xs []T, j int) float64 {
	if float64(xs[j]) > t.half[j] {
		return 1
	}
	return 0
}

// missing reports whether field f's cell is missing in the scaled row xs.
func missing[T float32 | float64](t *tableLik, xs []T, f int) bool {
	if f < 0 || t.ind == nil {
		return false
	}
	i := t.ind[f]
	return i >= 0 && float64(xs[i]) > t.half[i]
}

// rowLogLik is log p(x|z) of one scaled row xs under the decoder outputs
// o, in nats for raw units. fieldLL, when not nil, receives each
// observed field's own terms, added to.
func rowLogLik[T float32 | float64](t *tableLik, xs, o []T, fieldLL []float64) float64 {
	var ll float64
	for j, k := range t.kind {
		if k != tabGauss && k != tabBool {
			continue
		}
		f := t.field[j]
		if missing(t, xs, f) {
			continue
		}
		var term float64
		if k == tabBool {
			// a boolean: Bernoulli, the decoder's output its log-odds
			term = -losses.BCEWithLogitsElem(float64(o[j]), bit(t, xs, j))
		} else {
			term = t.logFactor[j] - losses.GaussianNLLElem(float64(xs[j]), float64(o[j]), t.lv[j])
		}
		ll += term
		if fieldLL != nil && f >= 0 {
			fieldLL[f] += term
		}
	}
	for i, s := range t.spans {
		f := t.spanField[i]
		if missing(t, xs, f) {
			continue
		}
		m := math.Inf(-1)
		for k := s[0]; k < s[1]; k++ {
			m = math.Max(m, float64(o[k]))
		}
		var z float64
		low := math.Inf(1)
		level := -1
		for k := s[0]; k < s[1]; k++ {
			z += math.Exp(float64(o[k]) - m)
			low = math.Min(low, float64(o[k]))
			if float64(xs[k]) > t.half[k] {
				level = k
			}
		}
		v := low // a level not seen in training: the least probable one's
		if level >= 0 {
			v = float64(o[level])
		}
		term := v - m - math.Log(z)
		ll += term
		if fieldLL != nil && f >= 0 {
			fieldLL[f] += term
		}
	}
	if t.ind != nil {
		for f, i := range t.ind {
			if i >= 0 && float64(xs[i]) > t.half[i] {
				ll -= t.cost[f]
			}
		}
	}
	return ll
}

// FitMissingCost sets MissingCost from normal rows (not used for
// training): each column with missing-cell indicators is charged, where a
// row misses it, minus its mean log-likelihood over the rows that have
// it, estimated as the score estimates it (ScoreSamples draws from the
// score's seed). Calibrate calls it; it changes the model, like
// Calibrate. A model without such columns keeps none; on an error the
// model is unchanged.
func (m *Model) FitMissingCost(x []float32, rows int) error {
	cost, err := m.missingCost(x, rows)
	if err == nil {
		m.MissingCost = cost
	}
	return err
}

// missingCost computes FitMissingCost's costs (nil: no column has
// missing cells).
func (m *Model) missingCost(x []float32, rows int) ([]float64, error) {
	t := m.table()
	if t == nil || !slices.ContainsFunc(t.ind, func(i int) bool { return i >= 0 }) {
		return nil, nil
	}
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	d, L, S := m.cfg.Inputs, m.cfg.Latent, ScoreSamples
	sum := make([]float64, len(t.ind))
	n := make([]int, len(t.ind))
	fieldLL := make([]float64, len(t.ind))
	const chunk = 256
	for lo := 0; lo < rows; lo += chunk {
		hi := min(rows, lo+chunk)
		xr := x[lo*d : hi*d]
		xs := m.scaled(xr)
		mu, lv, err := m.posterior(w, xs, hi-lo)
		if err != nil {
			return nil, err
		}
		z, _ := draws(xr, mu, lv, hi-lo, L, S, stream.ScoreSeed, stream.ELBODraws)
		out, err := m.forward(&w.ws2, m.Decoder, z, (hi-lo)*S)
		if err != nil {
			return nil, err
		}
		for r := 0; r < hi-lo; r++ {
			clear(fieldLL)
			row := xs[r*d : (r+1)*d]
			for k := 0; k < S; k++ {
				rowLogLik(t, row, out[(r*S+k)*d:(r*S+k+1)*d], fieldLL)
			}
			for f, i := range t.ind {
				if i >= 0 && !missing(t, row, f) {
					sum[f] += fieldLL[f] / float64(S)
					n[f]++
				}
			}
		}
	}
	cost := make([]float64, len(t.ind))
	for f, i := range t.ind {
		if i < 0 {
			continue
		}
		if n[f] == 0 {
			return nil, fmt.Errorf("vae: column %q is missing in every calibration row, so its missing cells cannot be charged: calibrate on rows that have it (hold out more rows)", m.Encoding.Fields[f].Name)
		}
		cost[f] = -sum[f] / float64(n[f])
	}
	return cost, nil
}

// tableContributions writes one scaled row's contributions (see
// Contributions) into c.
func tableContributions(t *tableLik, xs, o, c []float64) {
	for j, k := range t.kind {
		if (k != tabGauss && k != tabBool) || missing(t, xs, t.field[j]) {
			continue
		}
		if k == tabBool {
			c[j] = losses.BCEWithLogitsElem(o[j], bit(t, xs, j))
			continue
		}
		e := xs[j] - o[j]
		c[j] = 0.5 * e * e * math.Exp(-t.lv[j])
	}
	for i, s := range t.spans {
		if missing(t, xs, t.spanField[i]) {
			continue
		}
		m := math.Inf(-1)
		for k := s[0]; k < s[1]; k++ {
			m = math.Max(m, o[k])
		}
		var z float64
		low, at, level := math.Inf(1), s[0], -1
		for k := s[0]; k < s[1]; k++ {
			z += math.Exp(o[k] - m)
			if o[k] < low {
				low, at = o[k], k
			}
			if xs[k] > t.half[k] {
				level = k
			}
		}
		if level >= 0 {
			at = level
		}
		c[at] = m + math.Log(z) - o[at]
	}
}
