// Package vae holds variational autoencoders: a smooth latent space for
// embeddings and similarity search, synthetic samples, and a density score
// with a likelihood bound rather than a raw error.
//
// The encoder outputs the mean and log-variance of a diagonal Gaussian
// q(z|x), the decoder models Bernoulli data (logits) or Gaussian data with
// a fixed, per-column learned or shared learned variance, and the prior is
// N(0, I). A Model holds what inference needs: configuration, networks,
// the learned variance, the scaler and the threshold. Package train
// trains it (the reparameterised objective with a KL weight, its
// schedule and free bits); this package imports no graph library.
//
// Bounds: ELBO and the importance-weighted bound IWAE with k samples
// (stable log-mean-exp), active units, per-dimension KL. Latent tools:
// Encode (posterior means as embeddings), Sample from the prior,
// Reconstruct, Interpolate (linear or spherical), Traverse one axis, and an
// Index for nearest neighbours in latent space. Everything random takes a
// seed and is reproducible.
//
// Density scores: NegELBO scores rows (fixed-seed draws, so a row's score
// never changes), Calibrate sets a threshold on held-out normal rows and
// Score flags rows and names the columns behind each score. Scores are a
// decision aid, calibrated only for data like the training data.
//
// Inference needs no graph and is safe for concurrent use while nobody
// trains the model.
package vae
