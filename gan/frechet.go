package gan

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

// Gaussian is a mean and covariance fitted to feature rows.
type Gaussian struct {
	Mean []float64
	Cov  *mat.SymDense
}

// FitGaussian fits the sample mean and (unbiased) covariance of rows of
// cols features.
func FitGaussian(x []float32, rows, cols int) (Gaussian, error) {
	if rows < 2 || cols < 1 || len(x) != rows*cols {
		return Gaussian{}, fmt.Errorf("gan: %d values are not at least 2 rows of %d features", len(x), cols)
	}
	d := mat.NewDense(rows, cols, nil)
	for i := 0; i < rows; i++ {
		for j := 0; j < cols; j++ {
			d.Set(i, j, float64(x[i*cols+j]))
		}
	}
	g := Gaussian{Mean: make([]float64, cols), Cov: mat.NewSymDense(cols, nil)}
	for j := 0; j < cols; j++ {
		g.Mean[j] = stat.Mean(mat.Col(nil, j, d), nil)
	}
	stat.CovarianceMatrix(g.Cov, d, nil)
	return g, nil
}

// sqrtSym returns the symmetric square root of a symmetric positive
// semi-definite matrix from its eigen-decomposition, clamping tiny negative
// eigenvalues (rounding) to zero.
func sqrtSym(a *mat.SymDense) (*mat.SymDense, error) {
	var es mat.EigenSym
	if !es.Factorize(a, true) {
		return nil, fmt.Errorf("gan: eigen-decomposition failed")
	}
	vals := es.Values(nil)
	var vecs mat.Dense
	es.VectorsTo(&vecs)
	n := len(vals)
	out := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			var s float64
			for k := 0; k < n; k++ {
				s += vecs.At(i, k) * math.Sqrt(math.Max(vals[k], 0)) * vecs.At(j, k)
			}
			out.SetSym(i, j, s)
		}
	}
	return out, nil
}

// FrechetDistance is the Fréchet distance between two Gaussians,
// ||mu1 - mu2||^2 + Tr(S1 + S2 - 2 (S1 S2)^(1/2)). The trace of the matrix
// square root is computed stably as the sum of square roots of the
// eigenvalues of the symmetric matrix S1^(1/2) S2 S1^(1/2), which has the
// same eigenvalues as S1 S2.
func FrechetDistance(a, b Gaussian) (float64, error) {
	n := len(a.Mean)
	if len(b.Mean) != n || a.Cov.SymmetricDim() != n || b.Cov.SymmetricDim() != n {
		return 0, fmt.Errorf("gan: Gaussians of different dimensions")
	}
	var d float64
	for i := range a.Mean {
		e := a.Mean[i] - b.Mean[i]
		d += e * e
	}
	r, err := sqrtSym(a.Cov)
	if err != nil {
		return 0, err
	}
	var t mat.Dense
	t.Mul(r, b.Cov)
	t.Mul(&t, r)
	m := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			m.SetSym(i, j, 0.5*(t.At(i, j)+t.At(j, i)))
		}
	}
	var es mat.EigenSym
	if !es.Factorize(m, false) {
		return 0, fmt.Errorf("gan: eigen-decomposition failed")
	}
	var tr float64
	for _, v := range es.Values(nil) {
		tr += math.Sqrt(math.Max(v, 0))
	}
	for i := 0; i < n; i++ {
		d += a.Cov.At(i, i) + b.Cov.At(i, i)
	}
	return math.Max(d-2*tr, 0), nil
}

// FrechetRows fits Gaussians to two sets of feature rows and returns their
// Fréchet distance.
func FrechetRows(x []float32, xRows int, y []float32, yRows, cols int) (float64, error) {
	a, err := FitGaussian(x, xRows, cols)
	if err != nil {
		return 0, err
	}
	b, err := FitGaussian(y, yRows, cols)
	if err != nil {
		return 0, err
	}
	return FrechetDistance(a, b)
}

// Features maps rows of data to rows of features, e.g. an encoder's
// Encode method.
type Features func(x []float32, rows int) ([]float32, error)

// FrechetWith is FrechetRows on the features f gives of each set, with
// width feature columns.
func FrechetWith(f Features, width int, x []float32, xRows int, y []float32, yRows int) (float64, error) {
	fx, err := f(x, xRows)
	if err != nil {
		return 0, err
	}
	fy, err := f(y, yRows)
	if err != nil {
		return 0, err
	}
	return FrechetRows(fx, xRows, fy, yRows, width)
}
