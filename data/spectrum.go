package data

import (
	"fmt"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// SpectrumRows is the most rows Spectrum reads, fewer for wide data (at
// most spectrumWork / Cols^2, and never fewer than 2000): evenly spaced
// rows past it (a fixed stride, so the result depends on the data alone).
const SpectrumRows = 20000

const spectrumWork = 4e8

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
	p := d.Cols
	most := min(SpectrumRows, max(2000, int(spectrumWork/float64(p*p))))
	step := max(1, (d.Rows+most-1)/most)
	n := (d.Rows + step - 1) / step
	x := mat.NewDense(n, p, nil)
	mean := make([]float64, p)
	for r := range n {
		row := x.RawRowView(r)
		for j, v := range d.Row(r * step) {
			row[j] = s.apply(j, v)
			mean[j] += row[j]
		}
	}
	for j := range mean {
		mean[j] /= float64(n)
	}
	for r := range n {
		row := x.RawRowView(r)
		for j := range row {
			row[j] -= mean[j]
		}
	}
	var sym mat.SymDense
	sym.SymOuterK(1/float64(n), x.T())
	var eig mat.EigenSym
	if !eig.Factorize(&sym, false) {
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
