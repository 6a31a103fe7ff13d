// Package ae holds autoencoders and uses them for anomaly detection,
// embeddings and denoising.
//
// One Model type covers the usual kinds, switched on in its Config rather
// than written as separate copies:
//
//   - undercomplete: an MLP encoder down to Latent units and a mirrored
//     decoder (Linear for a linear autoencoder, which spans the principal
//     subspace);
//   - classification head: Classes adds a softmax head on the code, for
//     supervised or semi-supervised training;
//   - reuse: Encoder copies a trained encoder under a new head.
//
// A Model holds what inference needs and nothing else: its configuration,
// networks, the input scaler fitted at training time, the anomaly
// threshold and the names of its columns. Package train trains it (and
// decides how: input corruption for denoising, a sparsity penalty on the
// code, the weight of the classification term, a frozen encoder); this
// package imports no graph library, so a service that only scores links
// none.
//
// Inference (Encode, Decode, Reconstruct, RowErrors, Contributions,
// Score, Classify) needs no graph, takes any number of rows, and is safe
// for concurrent use from many goroutines while nobody trains the model.
// The Into variants write into the caller's buffers and allocate nothing
// in steady state.
//
// Anomaly detection: train on normal records, Calibrate a threshold on
// held-out normal records (by the largest error, or by a quantile for a
// target false-alarm rate, reporting the rate to expect), then Score new
// records: each gets its score, the threshold, a flag and the columns that
// drove it. Scores are a decision aid, calibrated only for data like the
// training data; show Caution with them.
//
// File and FromFile convert a model to and from a model file (package
// modelfile); FromFile checks the file's settings against the tensors it
// holds before building anything.
package ae
