package vae

import (
	"fmt"
	"math"
	"slices"
	"sort"
)

// Marginals maps a table VAE's samples onto the distribution each column
// has in the training rows, keeping how the columns go together: a
// number's sampled value is sent through the model's own distribution
// function for that column and back through the training rows' quantiles
// (a monotone map, so the rank of every sample among its column's
// samples is kept), and a category's levels and a boolean's probability
// are shifted on the logit scale until the model's sampled shares are the
// training rows' (FitMarginals), and a column's cells are missing as often
// as in the training rows, drawn on their own. A generator's figures per column then
// come close to drawing each column from its training rows on its own,
// while the relations between columns are the model's.
type Marginals struct {
	// Model and Train hold, for each number input (nil for the others),
	// Quantiles quantiles (at probabilities 0, 1/(Quantiles-1), ..., 1)
	// of the model's samples and of the training rows, in raw units.
	Model [][]float64 `json:"model"`
	Train [][]float64 `json:"train"`
	// Shift is, for each input, what is added to a category level's logit
	// or to a boolean's log-odds (0 elsewhere).
	Shift []float64 `json:"shift"`
	// Missing is, for each missing-cell indicator input, the share of
	// training rows that miss its column (0 elsewhere): samples miss it
	// as often, drawn on their own.
	Missing []float64 `json:"missing,omitempty"`
}

// MarginalSamples is how many rows FitMarginals draws to learn the
// model's own distributions, and MarginalQuantiles how many quantiles of
// each number it keeps.
const (
	MarginalSamples   = 50000
	MarginalQuantiles = 1001
)

// marginalSeed seeds FitMarginals' draws (one block of rows after
// another from marginalSeed, marginalSeed+1, ...).
const marginalSeed uint64 = 0x3a9

// marginalRounds is how many times FitMarginals draws and shifts the
// categories' logits (the shares move with each shift's effect through
// the softmax).
const marginalRounds = 10

// check reports a Marginals that does not fit inputs wide rows.
func (g *Marginals) check(inputs int) error {
	if len(g.Model) != inputs || len(g.Train) != inputs || len(g.Shift) != inputs || (g.Missing != nil && len(g.Missing) != inputs) {
		return fmt.Errorf("vae: marginal maps for %d, %d, %d and %d inputs, want %d", len(g.Model), len(g.Train), len(g.Shift), len(g.Missing), inputs)
	}
	for j := range g.Model {
		a, b := g.Model[j], g.Train[j]
		if len(a) != len(b) || (len(a) != 0 && len(a) < 2) {
			return fmt.Errorf("vae: marginal map of input %d: %d and %d quantiles", j, len(a), len(b))
		}
		for k := range a {
			if !finiteNum(a[k]) || !finiteNum(b[k]) || (k > 0 && (a[k] < a[k-1] || b[k] < b[k-1])) {
				return fmt.Errorf("vae: marginal map of input %d: quantiles not finite and rising", j)
			}
		}
		if !finiteNum(g.Shift[j]) {
			return fmt.Errorf("vae: marginal shift of input %d is %v", j, g.Shift[j])
		}
		if g.Missing != nil && !(g.Missing[j] >= 0 && g.Missing[j] <= 1) {
			return fmt.Errorf("vae: missing share of input %d is %v", j, g.Missing[j])
		}
	}
	return nil
}

func finiteNum(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// FitMarginals fits the model's Marginals to the training rows x (raw,
// rows of Inputs values): MarginalSamples samples drawn from a fixed seed
// give the model's own distribution of each column. Only models with a
// table likelihood sample by them. It changes the model: like Calibrate,
// not while others use it.
func (m *Model) FitMarginals(x []float32, rows int) error {
	t := m.table()
	if t == nil {
		return fmt.Errorf("vae: marginal maps are for models of a table (Config.Table)")
	}
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return err
	}
	if rows < 2 {
		return fmt.Errorf("vae: marginal maps need at least 2 training rows")
	}
	d := m.cfg.Inputs
	g := &Marginals{Model: make([][]float64, d), Train: make([][]float64, d), Shift: make([]float64, d)}
	missing := func(r, j int) bool {
		f := t.field[j]
		if f < 0 || t.ind == nil || t.ind[f] < 0 {
			return false
		}
		return x[r*d+t.ind[f]] >= 0.5
	}
	// the training rows' shares of each level and each boolean
	want := make([]float64, d)
	count := make([]float64, d)
	for r := 0; r < rows; r++ {
		for j, k := range t.kind {
			if missing(r, j) || (k != tabLevel && k != tabBool) {
				continue
			}
			count[j]++
			if x[r*d+j] >= 0.5 {
				want[j]++
			}
		}
	}
	isBool := func(j int) bool { return t.kind[j] == tabBool }
	for j, k := range t.kind {
		if k != tabIndicator {
			continue
		}
		if g.Missing == nil {
			g.Missing = make([]float64, d)
		}
		for r := 0; r < rows; r++ {
			if x[r*d+j] >= 0.5 {
				g.Missing[j]++
			}
		}
		g.Missing[j] /= float64(rows)
	}
	// the samples are drawn a block of rows at a time (memory bounded by
	// the block, whatever MarginalSamples), each block from its own seed
	block := max(16, min(2048, (1<<20)/d))
	forSamples := func(probs bool, fn func(s []float32, n int)) error {
		for b, lo := 0, 0; lo < MarginalSamples; b, lo = b+1, lo+block {
			n := min(block, MarginalSamples-lo)
			s, err := m.sampleTableWith(t, n, marginalSeed+uint64(b), g, probs)
			if err != nil {
				return err
			}
			fn(s, n)
		}
		return nil
	}
	got := make([]float64, d)
	for round := 0; round < marginalRounds; round++ {
		// the shares from the levels' probabilities, not from draws
		clear(got)
		err := forSamples(true, func(s []float32, n int) {
			for r := 0; r < n; r++ {
				for j, k := range t.kind {
					if k == tabLevel || k == tabBool {
						got[j] += float64(s[r*d+j])
					}
				}
			}
		})
		if err != nil {
			return err
		}
		for j, k := range t.kind {
			if count[j] == 0 || (k != tabLevel && !isBool(j)) {
				continue
			}
			p := clampShare(want[j]/count[j], count[j])
			q := clampShare(got[j]/MarginalSamples, MarginalSamples)
			if k == tabLevel {
				g.Shift[j] += math.Log(p / q)
			} else {
				g.Shift[j] += math.Log(p/(1-p)) - math.Log(q/(1-q))
			}
		}
	}
	// numbers: the model's quantiles under the shifts, the training rows'
	mo := make([][]float64, d)
	err := forSamples(false, func(s []float32, n int) {
		for j, k := range t.kind {
			if k != tabGauss {
				continue
			}
			for r := 0; r < n; r++ {
				mo[j] = append(mo[j], float64(s[r*d+j]))
			}
		}
	})
	if err != nil {
		return err
	}
	for j, k := range t.kind {
		if k != tabGauss {
			continue
		}
		var tr []float64
		for r := 0; r < rows; r++ {
			if !missing(r, j) {
				tr = append(tr, float64(x[r*d+j]))
			}
		}
		if len(tr) < 2 {
			continue
		}
		g.Model[j], g.Train[j] = quantiles(mo[j]), quantiles(tr)
	}
	if err := g.check(d); err != nil {
		return err
	}
	m.Marginals = g
	return nil
}

// clampShare keeps a share of n draws away from 0 and 1 by half a draw,
// so that its logarithms are finite.
func clampShare(p, n float64) float64 {
	lo := 0.5 / n
	return math.Min(math.Max(p, lo), 1-lo)
}

// quantiles is MarginalQuantiles quantiles of v by linear interpolation.
func quantiles(v []float64) []float64 {
	s := slices.Clone(v)
	sort.Float64s(s)
	q := make([]float64, MarginalQuantiles)
	for k := range q {
		h := float64(k) / float64(MarginalQuantiles-1) * float64(len(s)-1)
		lo := int(math.Floor(h))
		if lo+1 >= len(s) {
			q[k] = s[len(s)-1]
			continue
		}
		q[k] = s[lo] + (h-float64(lo))*(s[lo+1]-s[lo])
	}
	return q
}

// mapNumbers sends each number input of raw rows through its map: the
// model's quantiles to the training rows', linear between them, the ends
// held at the training rows' least and greatest.
func (g *Marginals) mapNumbers(raw []float32, d int) {
	for j := 0; j < d && j < len(g.Model); j++ {
		a, b := g.Model[j], g.Train[j]
		if len(a) == 0 {
			continue
		}
		for r := 0; r+d <= len(raw); r += d {
			raw[r+j] = float32(mapQuantile(float64(raw[r+j]), a, b))
		}
	}
}

// mapQuantile sends v from the distribution with quantiles a to the one
// with quantiles b (same probabilities).
func mapQuantile(v float64, a, b []float64) float64 {
	if !finiteNum(v) {
		return v // not a number the map can place: said by the caller's check
	}
	n := len(a)
	if v <= a[0] {
		return b[0]
	}
	if v >= a[n-1] {
		return b[n-1]
	}
	k := sort.SearchFloat64s(a, v) // a[k-1] < v <= a[k]
	lo, hi := a[k-1], a[k]
	f := 0.0
	if hi > lo {
		f = (v - lo) / (hi - lo)
	}
	return b[k-1] + f*(b[k]-b[k-1])
}
