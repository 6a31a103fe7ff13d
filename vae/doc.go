// Package vae trains variational autoencoders: a smooth latent space for
// embeddings and similarity search, synthetic samples, and a density score
// with a likelihood bound rather than a raw error.
//
// The encoder outputs the mean and log-variance of a diagonal Gaussian
// q(z|x); training draws z = mu + exp(logvar/2) * eps with eps fed in from
// the model's seeded generator, so gradients reach mu and logvar only
// (Reparameterise). Decoders model Bernoulli data (logits, binary
// cross-entropy) or Gaussian data with a fixed, per-column learned or
// shared learned variance. The KL term has a weight Beta with a constant,
// linear warm-up or cyclical schedule, and optional free bits per latent
// dimension.
//
// Training runs on the shared loop of package train and reports the
// objective, its reconstruction and KL parts and the current beta;
// validation reports the negative ELBO. Evaluation tools: ELBO and the
// importance-weighted bound IWAE with k samples (stable log-mean-exp),
// active units, per-dimension KL. Latent tools: Encode (posterior means as
// embeddings), Sample from the prior, Reconstruct, Interpolate (linear or
// spherical), Traverse one axis, and an Index for nearest neighbours in
// latent space. Everything random takes a seed and is reproducible.
//
// Density scores: NegELBO scores rows (fixed-seed draws, so a row's score
// never changes), Calibrate sets a threshold on held-out normal rows and
// Score flags rows and names the columns behind each score. Scores are a
// decision aid, calibrated only for data like the training data.
//
// Inference needs no graph and is safe for concurrent use while nobody
// trains the model.
package vae
