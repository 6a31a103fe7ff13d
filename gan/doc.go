// Package gan holds generative adversarial networks for tabular rows or
// small images and measures how good their samples are.
//
// A Model holds a generator and a discriminator (or a Wasserstein critic
// kept 1-Lipschitz by spectral normalisation), both MLPs built from the
// shared layers, the data scaler and the spectral-normalisation state.
// Conditional models feed a one-hot class to both networks; packing
// (Pack > 1) lets the discriminator judge several samples at once.
// Package train trains it, alternating discriminator and generator moves
// (the objectives, extra discriminator steps, label smoothing and the
// warnings of a failing run are its settings); this package imports no
// graph library.
//
// Generate, Sample and Discriminate need no graph and are safe for
// concurrent use while nobody trains the model; the same seed gives the
// same rows.
//
// Quality: FrechetDistance between Gaussians fitted to real and generated
// features, on raw columns (FrechetRows) or on the features of any encoder
// (FrechetWith), with the matrix square root taken through a symmetric
// eigen-decomposition.
package gan
