package losses

import "math"

// Log2Pi is log(2 pi), the constant of every Gaussian log-density in quern.
const Log2Pi = 1.8378770664093453

// The element forms below are the per-value terms of the objectives, for
// the graph-free passes of the models (scores, bounds, per-column
// contributions). The reference functions above reduce the same terms.

// BCEWithLogitsElem is the binary cross-entropy of sigmoid(x) against y,
// max(x,0) - x*y + log1p(exp(-|x|)): finite for any finite x. As a
// Bernoulli likelihood it is -log p(y | logit x).
func BCEWithLogitsElem(x, y float64) float64 {
	return math.Max(x, 0) - x*y + math.Log1p(math.Exp(-math.Abs(x)))
}

// ProbabilityClamp keeps BCEProbabilityElem finite for saturated
// probabilities. Common practice, no source.
const ProbabilityClamp = 1e-7

// BCEProbabilityElem is the binary cross-entropy -(y log p + (1-y)
// log(1-p)) of a probability p against y, with p first clamped to
// [ProbabilityClamp, 1-ProbabilityClamp].
func BCEProbabilityElem(p, y float64) float64 {
	p = math.Min(math.Max(p, ProbabilityClamp), 1-ProbabilityClamp)
	return -(y*math.Log(p) + (1-y)*math.Log1p(-p))
}

// GaussianNLLElem is the negative log-density of x under N(mu,
// exp(logvar)): 0.5*(log(2 pi) + logvar + (x-mu)^2 exp(-logvar)).
func GaussianNLLElem(x, mu, logvar float64) float64 {
	d := x - mu
	return 0.5 * (Log2Pi + logvar + d*d*math.Exp(-logvar))
}

// StdNormalNLLElem is the negative log-density of z under N(0, 1),
// 0.5*(log(2 pi) + z^2).
func StdNormalNLLElem(z float64) float64 { return 0.5 * (Log2Pi + z*z) }

// ReparamNLLElem is the negative log-density of mu + exp(logvar/2)*eps
// under N(mu, exp(logvar)), written in eps: 0.5*(log(2 pi) + logvar +
// eps^2).
func ReparamNLLElem(eps, logvar float64) float64 { return 0.5 * (Log2Pi + logvar + eps*eps) }

// KLStdNormalElem is one coordinate's KL divergence of N(mu, exp(logvar))
// from N(0, 1), -0.5*(1 + logvar - mu^2 - exp(logvar)) (Kingma & Welling
// 2014, Appendix B).
func KLStdNormalElem(mu, logvar float64) float64 {
	return -0.5 * (1 + logvar - mu*mu - math.Exp(logvar))
}

// BinaryEntropy is the entropy of a Bernoulli distribution of mean y in
// [0, 1], -(y log y + (1-y) log(1-y)) nats (0 at 0 and 1, log 2 at one
// half): the least BCEWithLogitsElem(x, y) can be over x, reached at
// sigmoid(x) = y. A grey level's cross-entropy less it is the
// Kullback-Leibler divergence of the model's Bernoulli from the level's.
// Outside [0, 1] it is 0.
func BinaryEntropy(y float64) float64 {
	if !(y > 0 && y < 1) {
		return 0
	}
	return -(y*math.Log(y) + (1-y)*math.Log1p(-y))
}
