// Package testenv holds what the tests of several packages share: whether
// the race detector is on, the committed data sets and the model files
// under testdata/compat. Training a model in one call needs package train,
// which the models' own tests cannot import; it is in package trainenv.
package testenv
