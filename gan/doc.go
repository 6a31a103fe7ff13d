// Package gan trains generative adversarial networks on tabular rows or
// small images and measures how good their samples are.
//
// A Model holds a generator and a discriminator, both MLPs built from the
// shared layers, each with its own Adam optimiser. Training alternates
// DiscSteps discriminator updates with one generator update; while one
// network trains the other's weights are bitwise unchanged (each phase's
// graph differentiates only its own network). Noise comes from the
// model's seeded generator and is fed in.
//
// Objectives: the discriminator's binary cross-entropy on real and
// generated batches with optional one-sided label smoothing, and the
// non-saturating (default) or minimax generator loss; or a Wasserstein
// critic kept 1-Lipschitz by spectral normalisation (power iteration).
// A gradient penalty is not offered: it needs the gradient of a gradient,
// which gorgonia v0.9.18 cannot build (a graph can be differentiated only
// once). Conditional generation feeds a one-hot class to both networks.
// Packing (Pack > 1) lets the discriminator judge several samples at once,
// a remedy for mode collapse.
//
// Monitoring runs through the shared loop's callbacks: per-step
// discriminator and generator losses, mean D(x) and D(G(z)), the
// discriminator's accuracy and the spread of generated samples relative to
// the data's, with warnings when the discriminator keeps winning or the
// samples collapse, and sample snapshots at intervals.
//
// Quality: FrechetDistance between Gaussians fitted to real and generated
// features, on raw columns (FrechetRows) or on the features of any encoder
// (FrechetWith), with the matrix square root taken through a symmetric
// eigen-decomposition.
//
// Generate and Discriminate need no graph and are safe for concurrent use
// while nobody trains the model.
package gan
