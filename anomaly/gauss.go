package anomaly

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// ErrNoProfile is returned by a model's FitProfile when its scores do not
// use a profile of normal rows (an image model scored by its
// reconstruction error, say): the caller goes on without one.
var ErrNoProfile = errors.New("anomaly: this model's score takes no profile")

// FullLimit is the widest vector a Gaussian keeps a full precision matrix
// for; wider vectors keep one variance per coordinate (a diagonal
// covariance), so that a model's file and its scoring cost stay small.
const FullLimit = 128

// Gaussian summarises normal vectors (a model's codes, or its
// reconstruction residuals) as a multivariate normal: their mean and the
// inverse of their covariance, shrunk towards a multiple of the identity
// by the Ledoit-Wolf rule (Ledoit and Wolf, "A well-conditioned estimator
// for large-dimensional covariance matrices", Journal of Multivariate
// Analysis 88, 2004), which keeps it invertible and well conditioned when
// there are few rows for the width. It marshals as JSON.
type Gaussian struct {
	Mean []float64 `json:"mean"`
	// Precision is the inverse shrunk covariance, row-major, for widths
	// up to FullLimit; nil beyond, where Variance holds the diagonal.
	Precision []float64 `json:"precision,omitempty"`
	Variance  []float64 `json:"variance,omitempty"`
	// Shrinkage is the Ledoit-Wolf weight of the identity target in [0, 1].
	Shrinkage float64 `json:"shrinkage"`
	Rows      int     `json:"rows"`
}

// FitGaussian fits a Gaussian to vectors of width p. each must visit the
// same vectors, in the same order, every time it is called (it is called
// twice: once for the mean, once for the covariance); visit must not keep
// the slice it is given.
func FitGaussian(p int, each func(visit func(v []float32)) error) (*Gaussian, error) {
	f, err := NewGaussianFit(p)
	if err != nil {
		return nil, err
	}
	if err := each(f.AddMean); err != nil {
		return nil, err
	}
	if err := each(f.AddScatter); err != nil {
		return nil, err
	}
	return f.Gaussian()
}

// GaussianFit fits a Gaussian in two passes over the same vectors: every
// vector to AddMean, then every vector, in the same order, to AddScatter,
// then Gaussian. FitGaussian wraps it; use it directly to fit several
// Gaussians in the same passes.
type GaussianFit struct {
	p, n, n2 int
	mean     []float64
	s        []float64 // upper triangle of the p*p scatter, or p squares
	sum4     float64   // sum of ||c||^4
	c        []float64
}

// NewGaussianFit starts a fit of vectors of width p.
func NewGaussianFit(p int) (*GaussianFit, error) {
	if p < 1 {
		return nil, fmt.Errorf("anomaly: a Gaussian of width %d", p)
	}
	f := &GaussianFit{p: p, mean: make([]float64, p), c: make([]float64, p)}
	if p <= FullLimit {
		f.s = make([]float64, p*p)
	} else {
		f.s = make([]float64, p)
	}
	return f, nil
}

// AddMean adds a vector to the first pass.
func (f *GaussianFit) AddMean(v []float32) {
	for j, x := range v[:f.p] {
		f.mean[j] += float64(x)
	}
	f.n++
}

// AddScatter adds a vector to the second pass.
func (f *GaussianFit) AddScatter(v []float32) {
	if f.n2 == 0 {
		for j := range f.mean {
			f.mean[j] /= float64(max(f.n, 1))
		}
	}
	f.n2++
	p, c := f.p, f.c
	var sq float64
	for j, x := range v[:p] {
		c[j] = float64(x) - f.mean[j]
		sq += c[j] * c[j]
	}
	if p <= FullLimit {
		f.sum4 += sq * sq
	}
	if p > FullLimit {
		// the diagonal form shrinks diag(S): its fourth-moment term is
		// sum_k ||diag(c_k c_k') - diag(S)||^2, built from c_kj^4
		for j, cj := range c {
			f.s[j] += cj * cj
			f.sum4 += cj * cj * cj * cj
		}
		return
	}
	for i, ci := range c {
		if ci == 0 {
			continue
		}
		row := f.s[i*p : i*p+p]
		for j := i; j < p; j++ {
			row[j] += ci * c[j]
		}
	}
}

// Gaussian finishes the fit.
func (f *GaussianFit) Gaussian() (*Gaussian, error) {
	p, n, s := f.p, f.n, f.s
	if n < 2 {
		return nil, fmt.Errorf("anomaly: a Gaussian needs at least 2 rows, got %d", n)
	}
	if f.n2 != n {
		return nil, fmt.Errorf("anomaly: %d vectors in the first pass of a Gaussian fit but %d in the second", n, f.n2)
	}
	g := &Gaussian{Mean: f.mean, Rows: n}
	full := p <= FullLimit
	fn := float64(n)
	var trace, frob float64
	for i := range p {
		if full {
			for j := i; j < p; j++ {
				s[i*p+j] /= fn
				s[j*p+i] = s[i*p+j]
				if j == i {
					frob += s[i*p+j] * s[i*p+j]
				} else {
					frob += 2 * s[i*p+j] * s[i*p+j]
				}
			}
			trace += s[i*p+i]
		} else {
			s[i] /= fn
			trace += s[i]
			frob += s[i] * s[i]
		}
	}
	sum4 := f.sum4
	mu := trace / float64(p)
	// ||S - mu I||^2 = ||S||^2 - 2 mu tr(S) + p mu^2
	d2 := (frob - 2*mu*trace + float64(p)*mu*mu) / float64(p)
	// (1/n^2) sum_k ||c_k c_k' - S||^2 = (sum_k ||c_k||^4 - n ||S||^2) / n^2
	b2 := (sum4 - fn*frob) / (fn * fn) / float64(p)
	b2 = max(0, min(b2, d2))
	if d2 > 0 {
		g.Shrinkage = b2 / d2
	}
	// a floor keeps constant vectors invertible: their distance is then
	// the squared deviation over 1e-12 (or over 1e-9 of the mean variance)
	floor := max(1e-9*mu, 1e-12)
	if !full {
		g.Variance = make([]float64, p)
		for j := range p {
			g.Variance[j] = g.Shrinkage*mu + (1-g.Shrinkage)*s[j] + floor
		}
		return g, nil
	}
	cov := mat.NewSymDense(p, nil)
	for i := range p {
		for j := i; j < p; j++ {
			v := (1 - g.Shrinkage) * s[i*p+j]
			if i == j {
				v += g.Shrinkage*mu + floor
			}
			cov.SetSym(i, j, v)
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(cov) {
		return nil, fmt.Errorf("anomaly: the shrunk covariance of %d rows of width %d is not positive definite", n, p)
	}
	var inv mat.SymDense
	if err := ch.InverseTo(&inv); err != nil {
		return nil, fmt.Errorf("anomaly: inverting the shrunk covariance: %w", err)
	}
	g.Precision = make([]float64, p*p)
	for i := range p {
		for j := range p {
			g.Precision[i*p+j] = inv.At(i, j)
		}
	}
	return g, nil
}

// Width is the width of the vectors g describes.
func (g *Gaussian) Width() int { return len(g.Mean) }

// Check reports whether g is well formed: widths that agree, finite
// values, positive variances.
func (g *Gaussian) Check() error {
	p := len(g.Mean)
	switch {
	case p == 0:
		return fmt.Errorf("anomaly: a Gaussian with no mean")
	case g.Precision != nil && len(g.Precision) != p*p:
		return fmt.Errorf("anomaly: a Gaussian of width %d with %d precision values", p, len(g.Precision))
	case g.Precision == nil && len(g.Variance) != p:
		return fmt.Errorf("anomaly: a Gaussian of width %d with %d variances", p, len(g.Variance))
	}
	for _, v := range g.Mean {
		if !finite(v) {
			return fmt.Errorf("anomaly: a Gaussian mean of %v", v)
		}
	}
	for _, v := range g.Precision {
		if !finite(v) {
			return fmt.Errorf("anomaly: a Gaussian precision of %v", v)
		}
	}
	for _, v := range g.Variance {
		if !(v > 0) || math.IsInf(v, 0) {
			return fmt.Errorf("anomaly: a Gaussian variance of %v", v)
		}
	}
	return nil
}

// Terms writes into dst (grown to the width, returned) each coordinate's
// part of the squared Mahalanobis distance of v from the mean:
// c_j (P c)_j with c = v - mean, so that the parts sum to the distance.
// With a full precision a part can be negative (a deviation that another
// coordinate's makes expected). tmp is scratch of the width (grown).
func (g *Gaussian) Terms(dst, tmp []float64, v []float32) ([]float64, []float64) {
	p := len(g.Mean)
	if cap(dst) < p {
		dst = make([]float64, p)
	}
	if cap(tmp) < p {
		tmp = make([]float64, p)
	}
	dst, tmp = dst[:p], tmp[:p]
	for j, m := range g.Mean {
		tmp[j] = float64(v[j]) - m
	}
	if g.Precision == nil {
		for j, c := range tmp {
			dst[j] = c * c / g.Variance[j]
		}
		return dst, tmp
	}
	for i := range p {
		row := g.Precision[i*p : i*p+p]
		var t float64
		for j, c := range tmp {
			t += row[j] * c
		}
		dst[i] = tmp[i] * t
	}
	return dst, tmp
}

// Distance is the squared Mahalanobis distance of v from the mean (the sum
// of Terms); tmp and terms are scratch (grown, returned).
func (g *Gaussian) Distance(terms, tmp []float64, v []float32) (float64, []float64, []float64) {
	terms, tmp = g.Terms(terms, tmp, v)
	var d float64
	for _, t := range terms {
		d += t
	}
	return d, terms, tmp
}
