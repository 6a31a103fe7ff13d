// Package model opens any quern model file and says what the model in it
// can do.
//
// Open (or FromFile) returns a Model: its kind, the width and schema of
// its rows, its parameters and networks, and a way back to a model file.
// What else it offers is asked of it the way io.Writer is asked whether it
// is an io.StringWriter: by a type assertion on a small capability
// interface.
//
//	Scorer         anomaly scores against a calibrated threshold (ae, vae)
//	Calibrator     sets that threshold from held-out normal rows (ae, vae)
//	Encoder        codes or embeddings of rows (ae, vae)
//	Decoder        rows from codes (ae, vae)
//	Reconstructor  a row's reconstruction (ae, vae)
//	Sampler        new rows drawn from a seed (vae, gan)
//	ClassSampler   new rows of a chosen class (conditional gan)
//	Classifier     class probabilities (ae with a classification head)
//	Interpolator   a path between two rows through the latent space (vae)
//	Density        bounds on the log-likelihood of rows (vae)
//
// The command line and the HTTP server check capabilities, never kinds,
// so a new kind needs a case in FromFile and nothing more. Every
// capability is graph-free and safe for concurrent use while nobody
// trains the model.
package model
