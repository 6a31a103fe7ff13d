package losses

import "math"

// Node is a value of a computation graph: a Rows x Cols matrix, or a
// scalar (0 x 0).
type Node interface {
	Rows() int
	Cols() int
}

// Graph is what the graph forms need of a computation graph. quern's
// training engine implements it; the four fused methods (MSE,
// BCEWithLogitsSum, GroupedSoftmaxCESum,
// KLStdNormal) are kernels that bring their own
// gradients, the rest are element-wise arithmetic and reductions.
type Graph[N Node] interface {
	Const(v float64) N
	Add(a, b N) N
	Sub(a, b N) N
	Mul(a, b N) N
	Scale(x N, c float64) N
	Shift(x N, c float64) N
	Neg(x N) N
	Exp(x N) N
	Log(x N) N
	Square(x N) N
	Abs(x N) N
	ReLU(x N) N
	Softplus(x N) N
	Sum(x N) N
	Mean(x N) N
	SumRows(x N) N
	AddRow(x, r N) N
	MulRow(x, r N) N
	LogSoftmax(x N) N
	// MSE is the mean of (p - t)^2 over all elements.
	MSE(p, t N) N
	// BCEWithLogitsSum is the sum of BCEWithLogitsElem over all elements.
	BCEWithLogitsSum(x, y N) N
	// GroupedSoftmaxCESum is the softmax cross-entropy of each span of
	// columns [from, to) of x against the same columns of t, summed over
	// rows and spans (see GroupedSoftmaxCrossEntropy).
	GroupedSoftmaxCESum(x, t N, spans [][2]int) N
	// KLStdNormal is KLStdNormalElem summed over columns, averaged over
	// rows.
	KLStdNormal(mu, logvar N) N
	// Failf records a construction error.
	Failf(format string, args ...any)
}

// The Graph* functions are the graph forms of the objectives, built into
// the training graphs. Each computes the same quantity as its reference
// function with the same reduction; the tests hold the two together and
// check their gradients by finite differences.

func same[N Node](g Graph[N], name string, a, b N) bool {
	if a.Rows() != b.Rows() || a.Cols() != b.Cols() {
		g.Failf("losses: %s: shapes %dx%d and %dx%d differ", name, a.Rows(), a.Cols(), b.Rows(), b.Cols())
		return false
	}
	return true
}

// GraphMSE is the graph form of MSE, one fused operation.
func GraphMSE[N Node](g Graph[N], pred, target N) N {
	same(g, "MSE", pred, target)
	return g.MSE(pred, target)
}

// GraphMaskedMSE is the graph form of MaskedMSE, from element-wise
// operations (the fused MSE has no mask).
func GraphMaskedMSE[N Node](g Graph[N], pred, target, mask N) N {
	if !same(g, "MaskedMSE", pred, target) || !same(g, "MaskedMSE", pred, mask) {
		return pred
	}
	d := g.Sub(pred, target)
	return g.Scale(g.Sum(g.Mul(mask, g.Square(d))), 1/float64(pred.Rows()*pred.Cols()))
}

// GraphBCE is the graph form of BCE for probabilities strictly inside (0, 1).
func GraphBCE[N Node](g Graph[N], p, y N) N {
	same(g, "BCE", p, y)
	one := g.Const(1)
	t := g.Add(g.Mul(y, g.Log(p)), g.Mul(g.Sub(one, y), g.Log(g.Sub(one, p))))
	return g.Neg(g.Mean(t))
}

// GraphBCEWithLogits is the graph form of BCEWithLogits: the fused
// max(x,0) - x*y + log1p(exp(-|x|)), whose gradient sigmoid(x) - y is exact
// and finite for any x, averaged over all elements.
func GraphBCEWithLogits[N Node](g Graph[N], x, y N) N {
	same(g, "BCEWithLogits", x, y)
	return g.Scale(g.BCEWithLogitsSum(x, y), 1/float64(max(1, x.Rows()*x.Cols())))
}

// GraphGaussianNLL is the graph form of GaussianNLL.
func GraphGaussianNLL[N Node](g Graph[N], x, mu, logvar N) N {
	same(g, "GaussianNLL", x, mu)
	same(g, "GaussianNLL", x, logvar)
	d := g.Sub(x, mu)
	t := g.Add(logvar, g.Mul(g.Square(d), g.Exp(g.Neg(logvar))))
	return g.Shift(g.Scale(g.Mean(t), 0.5), 0.5*Log2Pi)
}

// The likelihood forms below are the reconstruction terms of a VAE's
// objective: the negative log-likelihood of each row x under the decoder's
// output, summed over the row's columns and averaged over rows.

// GraphBernoulliNLL is -log p(x | logits) for Bernoulli columns:
// BCEWithLogitsElem summed over each row, averaged over rows.
func GraphBernoulliNLL[N Node](g Graph[N], logits, x N) N {
	same(g, "BernoulliNLL", logits, x)
	return g.Scale(g.BCEWithLogitsSum(logits, x), 1/float64(x.Rows()))
}

// GraphGaussianNLLFixed is -log N(x | mean, variance) with one fixed
// variance for every column.
func GraphGaussianNLLFixed[N Node](g Graph[N], x, mean N, variance float64) N {
	same(g, "GaussianNLLFixed", x, mean)
	return g.Scale(g.Sum(gaussElemsFixed(g, x, mean, variance)), 1/float64(x.Rows()))
}

func gaussElemsFixed[N Node](g Graph[N], x, mean N, variance float64) N {
	sq := g.Square(g.Sub(x, mean))
	return g.Shift(g.Scale(sq, 0.5/variance), 0.5*(Log2Pi+math.Log(variance)))
}

// GraphGaussianNLLColumns is -log N(x | mean, exp(logvar)) with one
// log-variance per column: logvar is a 1 x Cols row.
func GraphGaussianNLLColumns[N Node](g Graph[N], x, mean, logvar N) N {
	same(g, "GaussianNLLColumns", x, mean)
	if logvar.Rows() != 1 || logvar.Cols() != x.Cols() {
		g.Failf("losses: GaussianNLLColumns: log-variance %dx%d for %d columns", logvar.Rows(), logvar.Cols(), x.Cols())
	}
	return g.Scale(g.Sum(gaussElemsColumns(g, x, mean, logvar)), 1/float64(x.Rows()))
}

func gaussElemsColumns[N Node](g Graph[N], x, mean, logvar N) N {
	sq := g.Square(g.Sub(x, mean))
	return g.Scale(g.Shift(g.AddRow(g.MulRow(sq, g.Exp(g.Neg(logvar))), logvar), Log2Pi), 0.5)
}

// GraphGaussianNLLShared is -log N(x | mean, exp(logvar)) with one
// log-variance for every column: logvar is 1 x 1.
func GraphGaussianNLLShared[N Node](g Graph[N], x, mean, logvar N) N {
	same(g, "GaussianNLLShared", x, mean)
	return g.Scale(g.Sum(gaussElemsShared(g, x, mean, logvar)), 1/float64(x.Rows()))
}

func gaussElemsShared[N Node](g Graph[N], x, mean, logvar N) N {
	s := g.Sum(logvar)
	sq := g.Square(g.Sub(x, mean))
	return g.Scale(g.Add(g.Shift(g.Mul(sq, g.Exp(g.Neg(s))), Log2Pi), s), 0.5)
}

// GraphBernoulliNLLMasked is the binary cross-entropy of targets y under
// logits x, softplus(x) - x y, over the elements where mask is 1, summed
// over each row's columns and averaged over rows (a table's booleans; the
// unmasked form is GraphBernoulliNLL).
func GraphBernoulliNLLMasked[N Node](g Graph[N], x, y, mask N) N {
	same(g, "BernoulliNLLMasked", x, y)
	same(g, "BernoulliNLLMasked", x, mask)
	return g.Scale(g.Sum(g.Mul(mask, g.Sub(g.Softplus(x), g.Mul(x, y)))), 1/float64(x.Rows()))
}

// GraphGaussianNLLMasked is a Gaussian negative log-likelihood over the
// elements where mask is 1 (0 elsewhere: a missing cell, a column of
// another likelihood), summed over each row's columns and averaged over
// rows: logvar is a 1 x Cols row (one log-variance per column), a 1 x 1
// node (one for every column), or, with variance > 0, any node (it is
// not read) for that fixed variance. The unmasked forms are GraphGaussianNLLColumns,
// GraphGaussianNLLShared and GraphGaussianNLLFixed.
func GraphGaussianNLLMasked[N Node](g Graph[N], x, mean, logvar, mask N, variance float64) N {
	same(g, "GaussianNLLMasked", x, mean)
	same(g, "GaussianNLLMasked", x, mask)
	var elems N
	switch {
	case variance > 0:
		elems = gaussElemsFixed(g, x, mean, variance)
	case logvar.Rows() == 1 && logvar.Cols() == 1:
		elems = gaussElemsShared(g, x, mean, logvar)
	case logvar.Rows() == 1 && logvar.Cols() == x.Cols():
		elems = gaussElemsColumns(g, x, mean, logvar)
	default:
		g.Failf("losses: GaussianNLLMasked: log-variance %dx%d for %d columns", logvar.Rows(), logvar.Cols(), x.Cols())
		return x
	}
	return g.Scale(g.Sum(g.Mul(mask, elems)), 1/float64(x.Rows()))
}

// GraphKLStdNormal is the graph form of KLStdNormal: the KL of each row's
// diagonal Gaussian from N(0, I), summed over dimensions, averaged over rows.
func GraphKLStdNormal[N Node](g Graph[N], mu, logvar N) N {
	same(g, "KLStdNormal", mu, logvar)
	return g.KLStdNormal(mu, logvar)
}

// GraphKLStdNormalDims is the per-dimension KL from N(0, I) averaged over
// rows, as a 1 x dim row (used for free bits and reporting).
func GraphKLStdNormalDims[N Node](g Graph[N], mu, logvar N) N {
	same(g, "KLStdNormal", mu, logvar)
	return g.Scale(g.SumRows(klStdElems(g, mu, logvar)), 1/float64(mu.Rows()))
}

// GraphKLFreeBits is the KL of GraphKLStdNormalDims with every dimension
// charged at least floor nats, summed over dimensions (free bits, Kingma
// et al. 2016): dimensions below the floor are not pushed further toward
// the prior.
func GraphKLFreeBits[N Node](g Graph[N], mu, logvar N, floor float64) N {
	dims := GraphKLStdNormalDims(g, mu, logvar)
	return g.Sum(g.Shift(g.ReLU(g.Shift(dims, -floor)), floor))
}

func klStdElems[N Node](g Graph[N], mu, logvar N) N {
	// 0.5 * (mu^2 + exp(lv) - 1 - lv)
	t := g.Sub(g.Add(g.Square(mu), g.Exp(logvar)), g.Shift(logvar, 1))
	return g.Scale(t, 0.5)
}

// GraphKLDiagGaussians is the graph form of KLDiagGaussians.
func GraphKLDiagGaussians[N Node](g Graph[N], mu1, lv1, mu2, lv2 N) N {
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
func GraphKL[N Node](g Graph[N], p, q N) N {
	same(g, "KL", p, q)
	return g.Scale(g.Sum(g.Mul(p, g.Sub(g.Log(p), g.Log(q)))), 1/float64(p.Rows()))
}

// GraphCrossEntropy is -sum p log q per row (q strictly positive), averaged
// over rows.
func GraphCrossEntropy[N Node](g Graph[N], p, q N) N {
	same(g, "CrossEntropy", p, q)
	return g.Scale(g.Sum(g.Mul(p, g.Log(q))), -1/float64(p.Rows()))
}

// GraphJensenShannon is the Jensen-Shannon divergence between rows of p and
// q (strictly positive), averaged over rows.
func GraphJensenShannon[N Node](g Graph[N], p, q N) N {
	same(g, "JensenShannon", p, q)
	m := g.Scale(g.Add(p, q), 0.5)
	lm := g.Log(m)
	a := g.Mul(p, g.Sub(g.Log(p), lm))
	b := g.Mul(q, g.Sub(g.Log(q), lm))
	return g.Scale(g.Sum(g.Add(a, b)), 0.5/float64(p.Rows()))
}

// GraphSoftmaxCrossEntropy is the graph form of SoftmaxCrossEntropy.
func GraphSoftmaxCrossEntropy[N Node](g Graph[N], logits, t N) N {
	same(g, "SoftmaxCrossEntropy", logits, t)
	return g.Scale(g.Sum(g.Mul(t, g.LogSoftmax(logits))), -1/float64(logits.Rows()))
}

// GraphGroupedSoftmaxCE is the graph form of GroupedSoftmaxCrossEntropy,
// one fused operation.
func GraphGroupedSoftmaxCE[N Node](g Graph[N], x, t N, spans [][2]int) N {
	same(g, "GroupedSoftmaxCrossEntropy", x, t)
	return g.Scale(g.GroupedSoftmaxCESum(x, t, spans), 1/float64(max(1, x.Rows())))
}

// GraphLabelledCrossEntropy is the softmax cross-entropy of logits against
// one-hot rows, summed over the rows and multiplied by weight (a 1 x 1
// node): with all-zero rows for unlabelled rows and weight 1/(labelled
// rows), the mean over the labelled rows, for semi-supervised training.
func GraphLabelledCrossEntropy[N Node](g Graph[N], logits, onehot, weight N) N {
	same(g, "LabelledCrossEntropy", logits, onehot)
	return g.Sum(g.Mul(g.Sum(g.Mul(onehot, g.LogSoftmax(logits))), g.Neg(weight)))
}

// GraphL1Activity is the graph form of L1Activity.
func GraphL1Activity[N Node](g Graph[N], h N) N {
	return g.Scale(g.Sum(g.Abs(h)), 1/float64(h.Rows()))
}

// GraphKLSparsity is the graph form of KLSparsity; h must lie in (0, 1)
// (sigmoid codes) and 0 < rho < 1.
func GraphKLSparsity[N Node](g Graph[N], h N, rho float64) N {
	rhoHat := g.Scale(g.SumRows(h), 1/float64(h.Rows()))
	one := g.Const(1)
	// rho log rho + (1-rho) log(1-rho) - rho log rhoHat - (1-rho) log(1-rhoHat)
	t := g.Add(g.Scale(g.Log(rhoHat), rho), g.Scale(g.Log(g.Sub(one, rhoHat)), 1-rho))
	c := float64(h.Cols()) * (xlogx(rho) + xlogx(1-rho))
	return g.Shift(g.Neg(g.Sum(t)), c)
}

// GraphDiscriminatorBCE is the graph form of DiscriminatorBCE on logits.
func GraphDiscriminatorBCE[N Node](g Graph[N], real, fake N, realLabel float64) N {
	// BCE(x, l) = softplus(x) - l*x
	r := g.Mean(g.Sub(g.Softplus(real), g.Scale(real, realLabel)))
	f := g.Mean(g.Softplus(fake))
	return g.Add(r, f)
}

// GraphGeneratorNonSaturating is the graph form of GeneratorNonSaturating.
func GraphGeneratorNonSaturating[N Node](g Graph[N], fake N) N {
	return g.Mean(g.Softplus(g.Neg(fake)))
}

// GraphGeneratorMinimax is the graph form of GeneratorMinimax.
func GraphGeneratorMinimax[N Node](g Graph[N], fake N) N {
	return g.Neg(g.Mean(g.Softplus(fake)))
}

// GraphWassersteinCritic is the graph form of WassersteinCritic.
func GraphWassersteinCritic[N Node](g Graph[N], real, fake N) N {
	return g.Sub(g.Mean(fake), g.Mean(real))
}

// GraphWassersteinGenerator is the graph form of WassersteinGenerator.
func GraphWassersteinGenerator[N Node](g Graph[N], fake N) N {
	return g.Neg(g.Mean(fake))
}
