// Package ae trains autoencoders and uses them for anomaly detection,
// embeddings and denoising.
//
// One Model type covers the usual kinds, switched on in its Config rather
// than written as separate copies:
//
//   - undercomplete: an MLP encoder down to Latent units and a mirrored
//     decoder (Linear for a linear autoencoder, which spans the principal
//     subspace);
//   - denoising: Noise corrupts training inputs (Gaussian, masking,
//     salt-and-pepper) while the loss is taken against the clean input;
//   - sparse: an L1 or KL penalty on the code from package losses;
//   - supervised head: Classes adds a softmax head on the code; rows whose
//     label is data.Unlabelled train the reconstruction only, so partly
//     labelled data trains semi-supervised;
//   - reuse: Encoder copies a trained encoder, frozen (FreezeEncoder) or
//     fine-tuned, under a new head (HeadOnly).
//
// Train fits the input scaler on the training data and runs the shared loop
// of package train (validation, early stopping with best-weight restore,
// progress callbacks, cancellation, typed errors for a non-finite loss).
//
// Inference (Encode, Decode, Reconstruct, RowErrors, Contributions,
// Score, Classify) needs no graph, takes any number of rows, and is safe
// for concurrent use from many goroutines while nobody trains the model.
//
// Anomaly detection: train on normal records, Calibrate a threshold on
// held-out normal records (by the largest error, or by a quantile for a
// target false-alarm rate, reporting the rate to expect), then Score new
// records: each gets its score, the threshold, a flag and the columns that
// drove it. Scores are a decision aid, calibrated only for data like the
// training data; show Caution with them.
package ae
