// Package modelfile reads and writes quern's model files: a format of our
// own (FORMAT.md beside this file) holding a model kind, JSON metadata and
// named float32 or float64 tensors, sealed by a SHA-256 checksum.
//
// Write is atomic (temporary file, fsync, rename, folder fsync), so a
// crash during a save never destroys the previous file. Read and Decode
// check the magic, the checksum and the version, and every declared length
// against the bytes present before allocating, so a truncated, corrupted,
// hostile or future-version file returns an error (a *CorruptError or
// ErrVersion) and never panics. A fuzz target guards the decoder.
//
// The metadata is a set of sections, each owned by one layer (the model
// kind, package train, the command line): File.Section and SetSection read
// and write one. The ae, vae and gan packages map their models to and
// from File values; package model opens any of them.
package modelfile
