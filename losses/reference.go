package losses

import (
	"errors"
	"fmt"
	"math"
)

// ErrShape is wrapped by errors for mismatched argument lengths.
var ErrShape = errors.New("losses: argument lengths differ")

func sameLen(name string, a, b int) error {
	if a != b {
		return fmt.Errorf("%w: %s: %d and %d", ErrShape, name, a, b)
	}
	if a == 0 {
		return fmt.Errorf("%w: %s: empty input", ErrShape, name)
	}
	return nil
}

// MSE is the mean of (pred-target)^2 over all elements.
func MSE(pred, target []float64) (float64, error) {
	if err := sameLen("MSE", len(pred), len(target)); err != nil {
		return 0, err
	}
	var s float64
	for i, p := range pred {
		d := p - target[i]
		s += d * d
	}
	return s / float64(len(pred)), nil
}

// MaskedMSE is the squared error of pred against target where mask is 1
// (0 elsewhere), summed and divided by the number of all elements: the
// mean squared error with the masked elements (a table's missing cells)
// counting as no error, so that what the target holds there does not
// matter. With a mask of ones it is MSE.
func MaskedMSE(pred, target, mask []float64) (float64, error) {
	if err := sameLen("MaskedMSE", len(pred), len(target)); err != nil {
		return 0, err
	}
	if err := sameLen("MaskedMSE", len(pred), len(mask)); err != nil {
		return 0, err
	}
	var s float64
	for i, p := range pred {
		d := p - target[i]
		s += mask[i] * d * d
	}
	return s / float64(len(pred)), nil
}

// logClamp is the floor applied to log terms of BCE on probabilities, so
// that p = 0 or 1 gives a finite loss (the same convention as the
// general-purpose library whose values the golden tests use).
const logClamp = -100

// BCE is the mean binary cross-entropy -[y log p + (1-y) log(1-p)] of
// probabilities p against targets y in [0, 1], with each log clamped at -100.
func BCE(p, y []float64) (float64, error) {
	if err := sameLen("BCE", len(p), len(y)); err != nil {
		return 0, err
	}
	var s float64
	for i, pi := range p {
		s -= y[i]*math.Max(math.Log(pi), logClamp) + (1-y[i])*math.Max(math.Log1p(-pi), logClamp)
	}
	return s / float64(len(p)), nil
}

// BCEWithLogits is the mean binary cross-entropy of sigmoid(x) against y,
// computed as max(x,0) - x*y + log1p(exp(-|x|)): finite for any finite x.
func BCEWithLogits(x, y []float64) (float64, error) {
	if err := sameLen("BCEWithLogits", len(x), len(y)); err != nil {
		return 0, err
	}
	var s float64
	for i, xi := range x {
		s += BCEWithLogitsElem(xi, y[i])
	}
	return s / float64(len(x)), nil
}

// GaussianNLL is the mean negative log-density of x under N(mu, exp(logvar))
// element-wise: 0.5*(log(2 pi) + logvar + (x-mu)^2 exp(-logvar)).
func GaussianNLL(x, mu, logvar []float64) (float64, error) {
	if err := sameLen("GaussianNLL", len(x), len(mu)); err != nil {
		return 0, err
	}
	if err := sameLen("GaussianNLL", len(x), len(logvar)); err != nil {
		return 0, err
	}
	var s float64
	for i, xi := range x {
		s += GaussianNLLElem(xi, mu[i], logvar[i])
	}
	return s / float64(len(x)), nil
}

// BernoulliNLLMasked is the sum of mask * BCEWithLogitsElem(x, y) over
// all elements divided by rows.
func BernoulliNLLMasked(x, y, mask []float64, rows int) (float64, error) {
	for _, o := range [][]float64{y, mask} {
		if err := sameLen("BernoulliNLLMasked", len(x), len(o)); err != nil {
			return 0, err
		}
	}
	if rows <= 0 || len(x)%rows != 0 {
		return 0, fmt.Errorf("%w: BernoulliNLLMasked: %d values are not %d rows", ErrShape, len(x), rows)
	}
	var s float64
	for i, xi := range x {
		s += mask[i] * BCEWithLogitsElem(xi, y[i])
	}
	return s / float64(rows), nil
}

// GaussianNLLMasked is the sum of mask * GaussianNLLElem(x, mu, logvar)
// over all elements divided by rows: the negative log-likelihood of the
// elements where mask is 1, summed over a row's columns, averaged over
// rows.
func GaussianNLLMasked(x, mu, logvar, mask []float64, rows int) (float64, error) {
	for _, o := range [][]float64{mu, logvar, mask} {
		if err := sameLen("GaussianNLLMasked", len(x), len(o)); err != nil {
			return 0, err
		}
	}
	if rows <= 0 || len(x)%rows != 0 {
		return 0, fmt.Errorf("%w: GaussianNLLMasked: %d values are not %d rows", ErrShape, len(x), rows)
	}
	var s float64
	for i, xi := range x {
		s += mask[i] * GaussianNLLElem(xi, mu[i], logvar[i])
	}
	return s / float64(rows), nil
}

// KLStdNormal is the closed-form KL divergence of N(mu, diag(exp(logvar)))
// from N(0, I), -0.5 * sum(1 + logvar - mu^2 - exp(logvar)), for rows
// vectors of dim values each, averaged over rows (Kingma & Welling 2014,
// Appendix B). perDim, when not nil, receives the per-dimension average.
func KLStdNormal(mu, logvar []float64, dim int, perDim []float64) (float64, error) {
	if err := sameLen("KLStdNormal", len(mu), len(logvar)); err != nil {
		return 0, err
	}
	if dim <= 0 || len(mu)%dim != 0 {
		return 0, fmt.Errorf("%w: KLStdNormal: %d values are not rows of %d", ErrShape, len(mu), dim)
	}
	if perDim != nil && len(perDim) != dim {
		return 0, fmt.Errorf("%w: KLStdNormal: perDim has %d entries, want %d", ErrShape, len(perDim), dim)
	}
	clear(perDim)
	rows := len(mu) / dim
	var s float64
	for i, m := range mu {
		k := KLStdNormalElem(m, logvar[i])
		s += k
		if perDim != nil {
			perDim[i%dim] += k / float64(rows)
		}
	}
	return s / float64(rows), nil
}

// KLDiagGaussians is KL(N(mu1, exp(lv1)) || N(mu2, exp(lv2))) for diagonal
// Gaussians, summed over the dim coordinates of each row and averaged over
// rows: 0.5 * sum(lv2 - lv1 + (exp(lv1) + (mu1-mu2)^2)/exp(lv2) - 1).
func KLDiagGaussians(mu1, lv1, mu2, lv2 []float64, dim int) (float64, error) {
	n := len(mu1)
	for _, l := range []int{len(lv1), len(mu2), len(lv2)} {
		if err := sameLen("KLDiagGaussians", n, l); err != nil {
			return 0, err
		}
	}
	if dim <= 0 || n%dim != 0 {
		return 0, fmt.Errorf("%w: KLDiagGaussians: %d values are not rows of %d", ErrShape, n, dim)
	}
	var s float64
	for i := range mu1 {
		d := mu1[i] - mu2[i]
		s += 0.5 * (lv2[i] - lv1[i] + (math.Exp(lv1[i])+d*d)*math.Exp(-lv2[i]) - 1)
	}
	return s / float64(n/dim), nil
}

func checkDist(name string, p []float64) error {
	var s float64
	for i, v := range p {
		if !(v >= 0) || math.IsInf(v, 0) {
			return fmt.Errorf("losses: %s: entry %d is %v, want a probability", name, i, v)
		}
		s += v
	}
	if math.Abs(s-1) > 1e-9*float64(len(p))+1e-12 {
		return fmt.Errorf("losses: %s: entries sum to %v, want 1", name, s)
	}
	return nil
}

// KL is the discrete KL divergence sum p log(p/q) in nats, with 0 log 0 = 0.
// It is +Inf when q is 0 where p is not.
func KL(p, q []float64) (float64, error) {
	if err := sameLen("KL", len(p), len(q)); err != nil {
		return 0, err
	}
	if err := checkDist("KL p", p); err != nil {
		return 0, err
	}
	if err := checkDist("KL q", q); err != nil {
		return 0, err
	}
	var s float64
	for i, pi := range p {
		if pi == 0 {
			continue
		}
		if q[i] == 0 {
			return math.Inf(1), nil
		}
		s += pi * math.Log(pi/q[i])
	}
	return s, nil
}

// CrossEntropy is -sum p log q in nats, with 0 log 0 = 0.
func CrossEntropy(p, q []float64) (float64, error) {
	if err := sameLen("CrossEntropy", len(p), len(q)); err != nil {
		return 0, err
	}
	if err := checkDist("CrossEntropy p", p); err != nil {
		return 0, err
	}
	if err := checkDist("CrossEntropy q", q); err != nil {
		return 0, err
	}
	var s float64
	for i, pi := range p {
		if pi == 0 {
			continue
		}
		if q[i] == 0 {
			return math.Inf(1), nil
		}
		s -= pi * math.Log(q[i])
	}
	return s, nil
}

// JensenShannon is the Jensen-Shannon divergence in nats:
// 0.5 KL(p||m) + 0.5 KL(q||m) with m = (p+q)/2. It lies in [0, log 2].
func JensenShannon(p, q []float64) (float64, error) {
	if err := sameLen("JensenShannon", len(p), len(q)); err != nil {
		return 0, err
	}
	if err := checkDist("JensenShannon p", p); err != nil {
		return 0, err
	}
	if err := checkDist("JensenShannon q", q); err != nil {
		return 0, err
	}
	var s float64
	for i := range p {
		m := 0.5 * (p[i] + q[i])
		if p[i] > 0 {
			s += 0.5 * p[i] * math.Log(p[i]/m)
		}
		if q[i] > 0 {
			s += 0.5 * q[i] * math.Log(q[i]/m)
		}
	}
	return s, nil
}

// SoftmaxCrossEntropy is the mean over rows of -sum_j t_j log softmax(x)_j
// for logits x and target distributions t, rows of classes values each.
func SoftmaxCrossEntropy(x, t []float64, classes int) (float64, error) {
	if err := sameLen("SoftmaxCrossEntropy", len(x), len(t)); err != nil {
		return 0, err
	}
	if classes <= 0 || len(x)%classes != 0 {
		return 0, fmt.Errorf("%w: SoftmaxCrossEntropy: %d values are not rows of %d", ErrShape, len(x), classes)
	}
	rows := len(x) / classes
	var s float64
	for r := 0; r < rows; r++ {
		xr, tr := x[r*classes:(r+1)*classes], t[r*classes:(r+1)*classes]
		m := math.Inf(-1)
		for _, v := range xr {
			m = math.Max(m, v)
		}
		var z float64
		for _, v := range xr {
			z += math.Exp(v - m)
		}
		lse := m + math.Log(z)
		for j, v := range xr {
			s -= tr[j] * (v - lse)
		}
	}
	return s / float64(rows), nil
}

// GroupedSoftmaxCrossEntropy is the mean over rows of the softmax
// cross-entropy -sum_k t_k log softmax(x[from:to])_k of each span of
// columns [from, to), summed over the spans, for rows of cols values: the
// reconstruction term of a table's categorical columns, one span per
// column's levels. Columns outside every span take no part; a row whose
// targets in a span are all zero (a missing cell) adds nothing for it.
func GroupedSoftmaxCrossEntropy(x, t []float64, cols int, spans [][2]int) (float64, error) {
	if err := sameLen("GroupedSoftmaxCrossEntropy", len(x), len(t)); err != nil {
		return 0, err
	}
	if cols <= 0 || len(x)%cols != 0 || len(x) == 0 {
		return 0, fmt.Errorf("%w: GroupedSoftmaxCrossEntropy: %d values are not rows of %d", ErrShape, len(x), cols)
	}
	used := make([]bool, cols)
	for _, sp := range spans {
		if sp[0] < 0 || sp[1] > cols || sp[1]-sp[0] < 2 {
			return 0, fmt.Errorf("%w: GroupedSoftmaxCrossEntropy: columns [%d,%d) of %d are not a group of two or more", ErrShape, sp[0], sp[1], cols)
		}
		for k := sp[0]; k < sp[1]; k++ {
			if used[k] {
				return 0, fmt.Errorf("%w: GroupedSoftmaxCrossEntropy: column %d is in two groups", ErrShape, k)
			}
			used[k] = true
		}
	}
	rows := len(x) / cols
	var s float64
	for r := 0; r < rows; r++ {
		for _, sp := range spans {
			xr, tr := x[r*cols+sp[0]:r*cols+sp[1]], t[r*cols+sp[0]:r*cols+sp[1]]
			ce, err := SoftmaxCrossEntropy(xr, tr, len(xr))
			if err != nil {
				return 0, err
			}
			s += ce
		}
	}
	return s / float64(rows), nil
}

// L1Activity is the sparsity penalty sum |h| over all elements divided by
// the number of rows (the mean per-row L1 norm of the code).
func L1Activity(h []float64, rows int) (float64, error) {
	if rows <= 0 || len(h)%rows != 0 {
		return 0, fmt.Errorf("%w: L1Activity: %d values are not %d rows", ErrShape, len(h), rows)
	}
	var s float64
	for _, v := range h {
		s += math.Abs(v)
	}
	return s / float64(rows), nil
}

// KLSparsity is the sparsity penalty sum_j KL(rho || rhoHat_j) between
// Bernoulli distributions, where rhoHat_j is the mean over rows of unit j's
// activation h (which must lie in (0, 1)) and rho the target mean.
func KLSparsity(h []float64, units int, rho float64) (float64, error) {
	if units <= 0 || len(h)%units != 0 || len(h) == 0 {
		return 0, fmt.Errorf("%w: KLSparsity: %d values are not rows of %d", ErrShape, len(h), units)
	}
	if !(rho > 0 && rho < 1) {
		return 0, fmt.Errorf("losses: KLSparsity: target %v outside (0, 1)", rho)
	}
	rows := len(h) / units
	var s float64
	for j := 0; j < units; j++ {
		var m float64
		for r := 0; r < rows; r++ {
			m += h[r*units+j]
		}
		m /= float64(rows)
		s += rho*math.Log(rho/m) + (1-rho)*math.Log((1-rho)/(1-m))
	}
	return s, nil
}

// DiscriminatorBCE is the discriminator's loss from its logits on real and
// generated batches: mean BCE(real, realLabel) + mean BCE(fake, 0).
// realLabel is 1, or less than 1 for one-sided label smoothing.
func DiscriminatorBCE(real, fake []float64, realLabel float64) (float64, error) {
	if len(real) == 0 || len(fake) == 0 {
		return 0, fmt.Errorf("%w: DiscriminatorBCE: empty batch", ErrShape)
	}
	var a, b float64
	for _, x := range real {
		a += BCEWithLogitsElem(x, realLabel)
	}
	for _, x := range fake {
		b += BCEWithLogitsElem(x, 0)
	}
	return a/float64(len(real)) + b/float64(len(fake)), nil
}

// GeneratorNonSaturating is -mean log D(G(z)) = mean softplus(-x) for
// discriminator logits x on generated samples (Goodfellow et al. 2014,
// section 3).
func GeneratorNonSaturating(fake []float64) (float64, error) {
	if len(fake) == 0 {
		return 0, fmt.Errorf("%w: GeneratorNonSaturating: empty batch", ErrShape)
	}
	var s float64
	for _, x := range fake {
		s += BCEWithLogitsElem(x, 1)
	}
	return s / float64(len(fake)), nil
}

// GeneratorMinimax is mean log(1 - D(G(z))) = -mean softplus(x), the
// generator's side of the original minimax game (Goodfellow et al. 2014,
// eq. 1), to be minimised.
func GeneratorMinimax(fake []float64) (float64, error) {
	if len(fake) == 0 {
		return 0, fmt.Errorf("%w: GeneratorMinimax: empty batch", ErrShape)
	}
	var s float64
	for _, x := range fake {
		s -= BCEWithLogitsElem(x, 0)
	}
	return s / float64(len(fake)), nil
}

// WassersteinCritic is the critic's loss mean f(fake) - mean f(real), to be
// minimised (Arjovsky et al. 2017, Algorithm 1).
func WassersteinCritic(real, fake []float64) (float64, error) {
	if len(real) == 0 || len(fake) == 0 {
		return 0, fmt.Errorf("%w: WassersteinCritic: empty batch", ErrShape)
	}
	return mean(fake) - mean(real), nil
}

// WassersteinGenerator is -mean f(fake).
func WassersteinGenerator(fake []float64) (float64, error) {
	if len(fake) == 0 {
		return 0, fmt.Errorf("%w: WassersteinGenerator: empty batch", ErrShape)
	}
	return -mean(fake), nil
}

func mean(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

func xlogx(x float64) float64 {
	if x == 0 {
		return 0
	}
	return x * math.Log(x)
}
