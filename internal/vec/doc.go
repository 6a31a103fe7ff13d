// Package vec holds quern's vector kernels for element-wise work that
// profiles showed: the binary cross-entropy on logits with its gradient
// in one pass, the scan of gradients for NaN and infinity, leaky ReLU and
// its gradient, tanh, adding one vector into another, and the squared
// error's sum (float64 lanes) and gradient. They are
// Go assembly for amd64 CPUs with AVX2 and FMA, chosen at run time, and
// live in a package of their own because a package that uses cgo
// (package engine in the -tags openblas build) cannot hold Go assembly.
// Elsewhere, and with -tags purego, callers fall back to their Go loops.
package vec
