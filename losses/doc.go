// Package losses is the one home of every objective quern trains with:
// mean squared error, binary cross-entropy on probabilities and on logits,
// Gaussian negative log-likelihood, the closed-form KL divergence of a
// diagonal Gaussian from N(0, I) (Kingma & Welling 2014, Appendix B) and
// between two diagonal Gaussians, discrete KL, cross-entropy and
// Jensen-Shannon divergences, softmax cross-entropy, sparsity penalties (L1
// on activations, KL toward a target mean activation) and the GAN losses:
// discriminator BCE, the non-saturating and minimax generator losses
// (Goodfellow et al. 2014) and the Wasserstein critic (Arjovsky et al. 2017).
//
// Each objective has up to three forms that compute the same number:
//
//   - a plain float64 reference function (MSE, KLStdNormal, ...), for
//     evaluation, reporting and as the independent side of the tests;
//   - element forms (BCEWithLogitsElem, GaussianNLLElem, KLStdNormalElem,
//     ...), the per-value terms that the models' graph-free passes sum into
//     scores, bounds and per-column contributions;
//   - a graph form (GraphMSE, GraphBernoulliNLL, GraphKLFreeBits, ...) that
//     package train builds into the training graphs. Graph forms are
//     generic over the small Graph interface, so this package imports no
//     graph library; the likelihoods of a VAE's decoder, free bits and the
//     semi-supervised cross-entropy are graph forms here too.
//
// Reference functions are checked against golden values computed by
// general-purpose libraries (testdata/losses/make_golden.py); graph forms
// against the references, and every graph form's gradient by finite
// differences against its reference. Log2Pi is the one log(2 pi).
//
// Reductions: element-wise losses (MSE, BCE, GaussianNLL) average over all
// elements; per-row divergences (the Gaussian KLs, SoftmaxCrossEntropy,
// L1Activity) sum within a row and average over rows; the discrete
// divergences take one distribution per call (reference) or per row
// (graph). All values are in nats.
package losses
