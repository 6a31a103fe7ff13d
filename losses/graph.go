package losses

import (
	"github.com/quernlab/quern/internal/engine"
)

// The Graph* functions are the graph forms of the losses above, used by the
// ae, vae and gan trainers to build training graphs. Each computes the same
// quantity as its reference function with the same reduction; the tests
// hold the two together and check their gradients by finite differences.

func same(g *engine.Graph, name string, a, b *engine.Node) bool {
	if a.Rows() != b.Rows() || a.Cols() != b.Cols() {
		g.Failf("losses: %s: shapes %dx%d and %dx%d differ", name, a.Rows(), a.Cols(), b.Rows(), b.Cols())
		return false
	}
	return true
}

// GraphMSE is the graph form of MSE, one fused operation.
func GraphMSE(g *engine.Graph, pred, target *engine.Node) *engine.Node {
	same(g, "MSE", pred, target)
	return g.MSE(pred, target)
}

// GraphBCE is the graph form of BCE for probabilities strictly inside (0, 1).
func GraphBCE(g *engine.Graph, p, y *engine.Node) *engine.Node {
	same(g, "BCE", p, y)
	one := g.Const(1)
	t := g.Add(g.Mul(y, g.Log(p)), g.Mul(g.Sub(one, y), g.Log(g.Sub(one, p))))
	return g.Neg(g.Mean(t))
}

// GraphBCEWithLogits is the graph form of BCEWithLogits: the fused
// max(x,0) - x*y + log1p(exp(-|x|)), whose gradient sigmoid(x) - y is exact
// and finite for any x.
func GraphBCEWithLogits(g *engine.Graph, x, y *engine.Node) *engine.Node {
	same(g, "BCEWithLogits", x, y)
	return g.Scale(g.BCEWithLogitsSum(x, y), 1/float64(max(1, x.Rows()*x.Cols())))
}

// BCEWithLogitsElems is the element-wise BCE on logits, before reduction,
// as one fused operation.
func BCEWithLogitsElems(g *engine.Graph, x, y *engine.Node) *engine.Node {
	return g.BCEWithLogits(x, y)
}

// GraphGaussianNLL is the graph form of GaussianNLL.
func GraphGaussianNLL(g *engine.Graph, x, mu, logvar *engine.Node) *engine.Node {
	same(g, "GaussianNLL", x, mu)
	same(g, "GaussianNLL", x, logvar)
	d := g.Sub(x, mu)
	t := g.Add(logvar, g.Mul(g.Square(d), g.Exp(g.Neg(logvar))))
	return g.Shift(g.Scale(g.Mean(t), 0.5), 0.5*log2Pi)
}

const log2Pi = 1.8378770664093453 // log(2*pi)

// GraphKLStdNormal is the graph form of KLStdNormal: the KL of each row's
// diagonal Gaussian from N(0, I), summed over dimensions, averaged over rows.
func GraphKLStdNormal(g *engine.Graph, mu, logvar *engine.Node) *engine.Node {
	same(g, "KLStdNormal", mu, logvar)
	return g.KLStdNormal(mu, logvar)
}

// GraphKLStdNormalDims is the per-dimension KL from N(0, I) averaged over
// rows, as a 1 x dim row (used for free bits and reporting).
func GraphKLStdNormalDims(g *engine.Graph, mu, logvar *engine.Node) *engine.Node {
	same(g, "KLStdNormal", mu, logvar)
	return g.Scale(g.SumRows(klStdElems(g, mu, logvar)), 1/float64(mu.Rows()))
}

func klStdElems(g *engine.Graph, mu, logvar *engine.Node) *engine.Node {
	// 0.5 * (mu^2 + exp(lv) - 1 - lv)
	t := g.Sub(g.Add(g.Square(mu), g.Exp(logvar)), g.Shift(logvar, 1))
	return g.Scale(t, 0.5)
}

// GraphKLDiagGaussians is the graph form of KLDiagGaussians.
func GraphKLDiagGaussians(g *engine.Graph, mu1, lv1, mu2, lv2 *engine.Node) *engine.Node {
	same(g, "KLDiagGaussians", mu1, lv1)
	same(g, "KLDiagGaussians", mu1, mu2)
	same(g, "KLDiagGaussians", mu1, lv2)
	d := g.Sub(mu1, mu2)
	t := g.Mul(g.Add(g.Exp(lv1), g.Square(d)), g.Exp(g.Neg(lv2)))
	t = g.Shift(g.Add(g.Sub(lv2, lv1), t), -1)
	return g.Scale(g.Sum(t), 0.5/float64(mu1.Rows()))
}

// GraphKL is the discrete KL divergence between rows of p and q (all entries
// strictly positive), averaged over rows.
func GraphKL(g *engine.Graph, p, q *engine.Node) *engine.Node {
	same(g, "KL", p, q)
	return g.Scale(g.Sum(g.Mul(p, g.Sub(g.Log(p), g.Log(q)))), 1/float64(p.Rows()))
}

// GraphCrossEntropy is -sum p log q per row (q strictly positive), averaged
// over rows.
func GraphCrossEntropy(g *engine.Graph, p, q *engine.Node) *engine.Node {
	same(g, "CrossEntropy", p, q)
	return g.Scale(g.Sum(g.Mul(p, g.Log(q))), -1/float64(p.Rows()))
}

// GraphJensenShannon is the Jensen-Shannon divergence between rows of p and
// q (strictly positive), averaged over rows.
func GraphJensenShannon(g *engine.Graph, p, q *engine.Node) *engine.Node {
	same(g, "JensenShannon", p, q)
	m := g.Scale(g.Add(p, q), 0.5)
	lm := g.Log(m)
	a := g.Mul(p, g.Sub(g.Log(p), lm))
	b := g.Mul(q, g.Sub(g.Log(q), lm))
	return g.Scale(g.Sum(g.Add(a, b)), 0.5/float64(p.Rows()))
}

// GraphSoftmaxCrossEntropy is the graph form of SoftmaxCrossEntropy.
func GraphSoftmaxCrossEntropy(g *engine.Graph, logits, t *engine.Node) *engine.Node {
	same(g, "SoftmaxCrossEntropy", logits, t)
	return g.Scale(g.Sum(g.Mul(t, g.LogSoftmax(logits))), -1/float64(logits.Rows()))
}

// GraphL1Activity is the graph form of L1Activity.
func GraphL1Activity(g *engine.Graph, h *engine.Node) *engine.Node {
	return g.Scale(g.Sum(g.Abs(h)), 1/float64(h.Rows()))
}

// GraphKLSparsity is the graph form of KLSparsity; h must lie in (0, 1)
// (sigmoid codes) and 0 < rho < 1.
func GraphKLSparsity(g *engine.Graph, h *engine.Node, rho float64) *engine.Node {
	rhoHat := g.Scale(g.SumRows(h), 1/float64(h.Rows()))
	one := g.Const(1)
	// rho log rho + (1-rho) log(1-rho) - rho log rhoHat - (1-rho) log(1-rhoHat)
	t := g.Add(g.Scale(g.Log(rhoHat), rho), g.Scale(g.Log(g.Sub(one, rhoHat)), 1-rho))
	c := float64(h.Cols()) * (xlogx(rho) + xlogx(1-rho))
	return g.Shift(g.Neg(g.Sum(t)), c)
}

// GraphDiscriminatorBCE is the graph form of DiscriminatorBCE on logits.
func GraphDiscriminatorBCE(g *engine.Graph, real, fake *engine.Node, realLabel float64) *engine.Node {
	// BCE(x, l) = softplus(x) - l*x
	r := g.Mean(g.Sub(g.Softplus(real), g.Scale(real, realLabel)))
	f := g.Mean(g.Softplus(fake))
	return g.Add(r, f)
}

// GraphGeneratorNonSaturating is the graph form of GeneratorNonSaturating.
func GraphGeneratorNonSaturating(g *engine.Graph, fake *engine.Node) *engine.Node {
	return g.Mean(g.Softplus(g.Neg(fake)))
}

// GraphGeneratorMinimax is the graph form of GeneratorMinimax.
func GraphGeneratorMinimax(g *engine.Graph, fake *engine.Node) *engine.Node {
	return g.Neg(g.Mean(g.Softplus(fake)))
}

// GraphWassersteinCritic is the graph form of WassersteinCritic.
func GraphWassersteinCritic(g *engine.Graph, real, fake *engine.Node) *engine.Node {
	return g.Sub(g.Mean(fake), g.Mean(real))
}

// GraphWassersteinGenerator is the graph form of WassersteinGenerator.
func GraphWassersteinGenerator(g *engine.Graph, fake *engine.Node) *engine.Node {
	return g.Neg(g.Mean(fake))
}
