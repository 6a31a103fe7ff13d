// Package layers holds quern's shared model building blocks: named
// parameters, activations, dense (affine) layers, multi-layer perceptrons
// built from a list of widths, seeded initialisation and dropout masks.
//
// Everything here is plain Go. A layer's parameters live in ordinary slices
// that the training graph reads in place and the optimisers update in
// place; the graph-free Forward32 and Forward64 passes compute the same
// functions for inference without any graph, from many goroutines at once
// (one Workspace per goroutine).
//
// Randomness: NewMLP draws every weight from the *rand.Rand it is given
// (math/rand/v2), never from the clock or a global source, so one seed gives
// bitwise the same network. Glorot uniform (Glorot & Bengio 2010) and He
// normal (He et al. 2015) initialisation are provided; InitAuto picks He for
// ReLU-like activations and Glorot otherwise. Biases start at zero.
//
// Parameter names are stable, "<mlp>.<layer>.weight" and
// "<mlp>.<layer>.bias", so that model files and checkpoints address them by
// name. Frozen parameters are left out of gradients and optimiser updates.
package layers
