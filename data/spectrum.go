package data

import (
	"fmt"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// SpectrumRows is the most rows Spectrum reads: evenly spaced rows past
// it (a fixed stride, so the result depends on the data alone).
const SpectrumRows = 20000

// SpectrumColumns is the widest data Spectrum decomposes.
const SpectrumColumns = 2048

// Spectrum returns the eigenvalues, largest first, of the covariance of d's
// rows after a scaler of the given kind fitted on them: the variance along
// each principal component. It reads at most SpectrumRows rows and refuses
// more than SpectrumColumns columns.
func Spectrum(d *Dataset, kind ScaleKind) ([]float64, error) {
	if d.Rows < 2 {
		return nil, fmt.Errorf("data: a spectrum needs at least 2 rows, got %d", d.Rows)
	}
	if d.Cols > SpectrumColumns {
		return nil, fmt.Errorf("data: a spectrum of %d columns (at most %d)", d.Cols, SpectrumColumns)
	}
	s, err := Fit(kind, d)
	if err != nil {
		return nil, err
	}
	step := max(1, (d.Rows+SpectrumRows-1)/SpectrumRows)
	p := d.Cols
	row := make([]float64, p)
	mean := make([]float64, p)
	n := 0
	for i := 0; i < d.Rows; i += step {
		for j, v := range d.Row(i) {
			mean[j] += s.apply(j, v)
		}
		n++
	}
	for j := range mean {
		mean[j] /= float64(n)
	}
	cov := make([]float64, p*p)
	for i := 0; i < d.Rows; i += step {
		for j, v := range d.Row(i) {
			row[j] = s.apply(j, v) - mean[j]
		}
		for a, va := range row {
			if va == 0 {
				continue
			}
			c := cov[a*p : a*p+p]
			for b := a; b < p; b++ {
				c[b] += va * row[b]
			}
		}
	}
	sym := mat.NewSymDense(p, nil)
	for a := range p {
		for b := a; b < p; b++ {
			sym.SetSym(a, b, cov[a*p+b]/float64(n))
		}
	}
	var eig mat.EigenSym
	if !eig.Factorize(sym, false) {
		return nil, fmt.Errorf("data: the eigen-decomposition of a %d-column covariance did not converge", p)
	}
	ev := eig.Values(nil)
	for i, v := range ev {
		ev[i] = max(v, 0) // rounding can leave tiny negative values
	}
	slices.SortFunc(ev, func(a, b float64) int {
		switch {
		case a > b:
			return -1
		case a < b:
			return 1
		}
		return 0
	})
	return ev, nil
}

// ComponentsFor is the fewest leading components of a spectrum (largest
// first) that explain at least frac of its total variance; 0 for a
// spectrum with no variance.
func ComponentsFor(ev []float64, frac float64) int {
	var total float64
	for _, v := range ev {
		total += v
	}
	if total <= 0 {
		return 0
	}
	var c float64
	for i, v := range ev {
		c += v
		if c >= frac*total*(1-1e-12) {
			return i + 1
		}
	}
	return len(ev)
}

// apply scales one value of column j in float64.
func (s *Scaler) apply(j int, v float32) float64 {
	return (float64(v) - s.Offset[j]) * s.Factor[j]
}
