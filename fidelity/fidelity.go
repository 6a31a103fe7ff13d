package fidelity

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sort"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
)

// Column is one column's fit: Statistic is "KS" (the two-sample
// Kolmogorov-Smirnov statistic, the largest gap between the two
// empirical distribution functions) for a number or an integer, "TV" (the
// total variation distance between the two distributions of levels) for
// a category or a boolean; 0 is a perfect match, 1 the worst.
type Column struct {
	Name      string  `json:"name"`
	Type      string  `json:"type"`
	Statistic string  `json:"statistic"`
	Value     float64 `json:"value"`
}

// Nearest is the copy check: the distance of rows to their nearest
// training row, in the training rows' standard deviations (each number a
// column, each level of a category a 0/1 column).
type Nearest struct {
	// Median is the synthetic rows' median distance, Holdout the held-out
	// real rows'.
	Median, Holdout float64
	// Closer is the share of synthetic rows nearer a training row than
	// the held-out rows' 5% quantile: about 0.05 for rows drawn like real
	// ones, near 1 for copies.
	Closer float64
	// Copies counts the measured synthetic rows that equal a training
	// row, of Measured (at most MaxNearest, an even sample of them).
	Copies, Measured int
}

// Fit is the figures of one set of rows against the held-out rows.
type Fit struct {
	Columns []Column `json:"columns"`
	// CorrelationGap is the mean absolute difference between the
	// held-out rows' and these rows' Pearson correlations, over pairs of
	// columns of different fields.
	CorrelationGap float64 `json:"correlation_gap"`
	// Frechet is the Fréchet distance between Gaussians fitted to the
	// held-out rows and to these, in the copy check's columns (each in
	// the training rows' standard deviations): 0 for the same mean and
	// covariance.
	Frechet float64 `json:"frechet"`
	Nearest Nearest `json:"nearest"`
}

// Report is Compare's answer.
type Report struct {
	// Synthetic is the synthetic rows' fit, Baseline that of as many rows
	// drawn column by column from the training rows.
	Synthetic, Baseline Fit
	// Rows counts the training, held-out and synthetic rows used.
	TrainRows, HoldoutRows, SyntheticRows int
}

// MaxNearest is the most rows of each set the copy check measures (an
// even sample of them when there are more) and the most training rows it
// measures them against: the check costs rows x training rows distances.
const MaxNearest = 4000

// ErrInput is wrapped by every error about Compare's input.
var ErrInput = errors.New("fidelity: unusable input")

// Compare measures synthetic rows against held-out real rows, with the
// training rows for the copy check and the baseline, all rows of enc's
// inputs (raw units, as a model samples them; enc nil: every input a
// number). seed draws the baseline and the samples of the copy check.
func Compare(train, holdout, synthetic *data.Dataset, enc *data.Encoding, seed uint64) (*Report, error) {
	for _, d := range []*data.Dataset{train, holdout, synthetic} {
		if d == nil || d.Rows < 2 {
			return nil, fmt.Errorf("%w: every set needs at least 2 rows", ErrInput)
		}
		if d.Cols != train.Cols || (enc != nil && d.Cols != enc.Width()) {
			return nil, fmt.Errorf("%w: %d, %d and %d columns (the encoding makes %d)", ErrInput, train.Cols, holdout.Cols, synthetic.Cols, widthOf(enc, train.Cols))
		}
	}
	v := newView(enc, train.Cols)
	tr, ho, sy := v.read(train), v.read(holdout), v.read(synthetic)
	rng := rand.New(rand.NewPCG(seed, 0xf1d))
	base := tr.marginals(synthetic.Rows, rng)
	r := &Report{TrainRows: train.Rows, HoldoutRows: holdout.Rows, SyntheticRows: synthetic.Rows}
	nn := newNearest(tr, rng)
	hoDist := nn.distances(ho, rng)
	r.Synthetic = v.fit(ho, sy, nn, hoDist, rng)
	r.Baseline = v.fit(ho, base, nn, hoDist, rng)
	return r, nil
}

func widthOf(e *data.Encoding, cols int) int {
	if e == nil {
		return cols
	}
	return e.Width()
}

// field kinds
const (
	number = iota
	category
	boolean
)

// view reads encoded rows as fields: a number (NaN where missing), a
// category's level (-1 where missing) or a boolean (0 or 1, -1 missing).
type view struct {
	names  []string
	types  []string
	kinds  []int
	at     []int // each field's first input
	levels []int // a category's level count
	ind    []int // each field's indicator input (-1: none)
}

func newView(e *data.Encoding, cols int) *view {
	v := &view{}
	if e == nil {
		for j := range cols {
			v.names = append(v.names, fmt.Sprintf("c%d", j))
			v.types = append(v.types, string(data.Numeric))
			v.kinds = append(v.kinds, number)
			v.at = append(v.at, j)
			v.levels = append(v.levels, 0)
			v.ind = append(v.ind, -1)
		}
		return v
	}
	at := 0
	for _, f := range e.Fields {
		v.names = append(v.names, f.Name)
		v.types = append(v.types, string(f.Type))
		v.at = append(v.at, at)
		v.levels = append(v.levels, len(f.Levels))
		k := number
		switch f.Type {
		case data.Categorical:
			k = category
		case data.Boolean:
			k = boolean
		}
		v.kinds = append(v.kinds, k)
		w := f.Width()
		ind := -1
		if f.Indicator {
			ind = at + w - 1
		}
		v.ind = append(v.ind, ind)
		at += w
	}
	return v
}

// table is rows read as fields, column by column.
type table struct {
	rows int
	cols [][]float64 // per field
	v    *view
}

func (v *view) read(d *data.Dataset) *table {
	t := &table{rows: d.Rows, v: v, cols: make([][]float64, len(v.kinds))}
	for f := range v.kinds {
		c := make([]float64, d.Rows)
		for r := range d.Rows {
			row := d.X[r*d.Cols : (r+1)*d.Cols]
			if i := v.ind[f]; i >= 0 && row[i] >= 0.5 {
				c[r] = math.NaN()
				if v.kinds[f] != number {
					c[r] = -1
				}
				continue
			}
			in := row[v.at[f]:]
			switch v.kinds[f] {
			case number:
				c[r] = float64(in[0])
			case boolean:
				c[r] = 0
				if in[0] >= 0.5 {
					c[r] = 1
				}
			case category:
				best := 0
				for l := 1; l < v.levels[f]; l++ {
					if in[l] > in[best] {
						best = l
					}
				}
				c[r] = float64(best)
				if in[best] <= 0 {
					c[r] = -1 // no level at all (a level not seen in training)
				}
			}
		}
		t.cols[f] = c
	}
	return t
}

// marginals draws n rows, each field's value from a training row of its
// own, drawn independently.
func (t *table) marginals(n int, rng *rand.Rand) *table {
	out := &table{rows: n, v: t.v, cols: make([][]float64, len(t.cols))}
	for f, c := range t.cols {
		s := make([]float64, n)
		for i := range s {
			s[i] = c[rng.IntN(t.rows)]
		}
		out.cols[f] = s
	}
	return out
}

func (v *view) fit(real, syn *table, nn *nearest, realDist []float64, rng *rand.Rand) Fit {
	var fit Fit
	for f, k := range v.kinds {
		c := Column{Name: v.names[f], Type: v.types[f]}
		if k == number {
			c.Statistic, c.Value = "KS", KS(present(real.cols[f]), present(syn.cols[f]))
		} else {
			c.Statistic, c.Value = "TV", TV(real.cols[f], syn.cols[f])
		}
		fit.Columns = append(fit.Columns, c)
	}
	fit.CorrelationGap = v.correlationGap(real, syn)
	fit.Frechet = nn.frechet(real, syn)
	d := nn.distances(syn, rng)
	q := quantile(realDist, 0.05)
	closer := 0
	for _, x := range d {
		if x < q {
			closer++
		}
		if x == 0 {
			fit.Nearest.Copies++
		}
	}
	fit.Nearest.Median, fit.Nearest.Holdout = quantile(d, 0.5), quantile(realDist, 0.5)
	fit.Nearest.Measured = len(d)
	fit.Nearest.Closer = float64(closer) / float64(len(d))
	return fit
}

// present is c without its NaNs (missing cells).
func present(c []float64) []float64 {
	out := make([]float64, 0, len(c))
	for _, x := range c {
		if !math.IsNaN(x) {
			out = append(out, x)
		}
	}
	return out
}

// KS is the two-sample Kolmogorov-Smirnov statistic of a and b: the
// largest absolute difference of their empirical distribution functions
// (1 when either is empty and the other not, 0 when both are).
func KS(a, b []float64) float64 {
	if len(a) == 0 || len(b) == 0 {
		if len(a) == len(b) {
			return 0
		}
		return 1
	}
	a, b = slices.Clone(a), slices.Clone(b)
	sort.Float64s(a)
	sort.Float64s(b)
	var i, j int
	var d float64
	for i < len(a) && j < len(b) {
		x := min(a[i], b[j])
		for i < len(a) && a[i] == x {
			i++
		}
		for j < len(b) && b[j] == x {
			j++
		}
		d = math.Max(d, math.Abs(float64(i)/float64(len(a))-float64(j)/float64(len(b))))
	}
	return d
}

// TV is the total variation distance between the distributions of the
// values of a and b (levels, -1 for missing): half the sum over values of
// the absolute difference of their shares.
func TV(a, b []float64) float64 {
	share := map[float64][2]float64{}
	for _, x := range a {
		s := share[x]
		s[0] += 1 / float64(len(a))
		share[x] = s
	}
	for _, x := range b {
		s := share[x]
		s[1] += 1 / float64(len(b))
		share[x] = s
	}
	var d float64
	for _, s := range share {
		d += math.Abs(s[0] - s[1])
	}
	return d / 2
}

// columns expands a table into numeric columns for correlations and
// distances: a number (missing cells at the column's mean), a boolean,
// and each level of a category as 0/1; owner says each one's field.
func (t *table) columns() (cols [][]float64, owner []int) {
	for f, c := range t.cols {
		switch t.v.kinds[f] {
		case number:
			p := present(c)
			var mean float64
			for _, x := range p {
				mean += x
			}
			if len(p) > 0 {
				mean /= float64(len(p))
			}
			o := make([]float64, len(c))
			for i, x := range c {
				o[i] = x
				if math.IsNaN(x) {
					o[i] = mean
				}
			}
			cols, owner = append(cols, o), append(owner, f)
		case boolean:
			o := make([]float64, len(c))
			for i, x := range c {
				o[i] = max(x, 0)
			}
			cols, owner = append(cols, o), append(owner, f)
		case category:
			for l := range t.v.levels[f] {
				o := make([]float64, len(c))
				for i, x := range c {
					if x == float64(l) {
						o[i] = 1
					}
				}
				cols, owner = append(cols, o), append(owner, f)
			}
		}
	}
	return cols, owner
}

// Correlation is the Pearson correlation of a and b, 0 when either is
// constant.
func Correlation(a, b []float64) float64 {
	n := float64(len(a))
	var ma, mb float64
	for i := range a {
		ma += a[i]
		mb += b[i]
	}
	ma, mb = ma/n, mb/n
	var sab, saa, sbb float64
	for i := range a {
		da, db := a[i]-ma, b[i]-mb
		sab += da * db
		saa += da * da
		sbb += db * db
	}
	if saa == 0 || sbb == 0 {
		return 0
	}
	return sab / math.Sqrt(saa*sbb)
}

func (v *view) correlationGap(real, syn *table) float64 {
	rc, owner := real.columns()
	sc, _ := syn.columns()
	var gap float64
	n := 0
	for i := range rc {
		for j := i + 1; j < len(rc); j++ {
			if owner[i] == owner[j] {
				continue
			}
			gap += math.Abs(Correlation(rc[i], rc[j]) - Correlation(sc[i], sc[j]))
			n++
		}
	}
	if n == 0 {
		return 0
	}
	return gap / float64(n)
}

// nearest holds (a sample of) the training rows, as columns scaled by
// their standard deviations, row-major.
type nearest struct {
	rows, cols int
	x          []float64
	mean, inv  []float64
}

func newNearest(t *table, rng *rand.Rand) *nearest {
	cols, _ := t.columns()
	idx := sample(t.rows, MaxNearest, rng)
	nn := &nearest{rows: len(idx), cols: len(cols), mean: make([]float64, len(cols)), inv: make([]float64, len(cols))}
	for j, c := range cols {
		var m, s float64
		for _, x := range c {
			m += x
		}
		m /= float64(len(c))
		for _, x := range c {
			s += (x - m) * (x - m)
		}
		s = math.Sqrt(s / float64(len(c)))
		nn.mean[j] = m
		if s > 0 {
			nn.inv[j] = 1 / s
		}
	}
	nn.x = make([]float64, 0, len(idx)*len(cols))
	for _, r := range idx {
		for j, c := range cols {
			nn.x = append(nn.x, (c[r]-nn.mean[j])*nn.inv[j])
		}
	}
	return nn
}

// frechet is the Fréchet distance between Gaussians fitted to a's and
// b's rows in nn's scaled columns (NaN when it cannot be computed).
func (nn *nearest) frechet(a, b *table) float64 {
	rows := func(t *table) []float32 {
		cols, _ := t.columns()
		out := make([]float32, 0, t.rows*len(cols))
		for r := range t.rows {
			for j, c := range cols {
				out = append(out, float32((c[r]-nn.mean[j])*nn.inv[j]))
			}
		}
		return out
	}
	d, err := gan.FrechetRows(rows(a), a.rows, rows(b), b.rows, nn.cols)
	if err != nil {
		return math.NaN()
	}
	return d
}

// distances gives (a sample of) t's rows' distances to their nearest
// training row.
func (nn *nearest) distances(t *table, rng *rand.Rand) []float64 {
	cols, _ := t.columns()
	idx := sample(t.rows, MaxNearest, rng)
	q := make([]float64, nn.cols)
	out := make([]float64, len(idx))
	for k, r := range idx {
		for j, c := range cols {
			q[j] = (c[r] - nn.mean[j]) * nn.inv[j]
		}
		best := math.Inf(1)
		for i := 0; i < nn.rows; i++ {
			row := nn.x[i*nn.cols : (i+1)*nn.cols]
			var s float64
			for j, x := range row {
				d := q[j] - x
				s += d * d
				if s >= best {
					break
				}
			}
			best = min(best, s)
		}
		out[k] = math.Sqrt(best)
	}
	return out
}

// sample is every index below n, or an even-chance sample of max of
// them, in order.
func sample(n, max int, rng *rand.Rand) []int {
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	if n <= max {
		return idx
	}
	rng.Shuffle(n, func(i, j int) { idx[i], idx[j] = idx[j], idx[i] })
	idx = idx[:max]
	sort.Ints(idx)
	return idx
}

// quantile is the p-quantile of v by linear interpolation (numpy's
// default), NaN for no values.
func quantile(v []float64, p float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	s := slices.Clone(v)
	sort.Float64s(s)
	h := p * float64(len(s)-1)
	lo := int(math.Floor(h))
	if lo+1 >= len(s) {
		return s[len(s)-1]
	}
	return s[lo] + (h-float64(lo))*(s[lo+1]-s[lo])
}
