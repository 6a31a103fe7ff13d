// Package vec holds quern's vector kernels for element-wise work that
// profiles showed: the binary cross-entropy on logits with its gradient
// in one pass, the scan of gradients for NaN and infinity, leaky ReLU and
// its gradient, tanh, adding one vector into another, and the squared
// error's sum (float64 lanes) and gradient. They are Go assembly for amd64
// CPUs with AVX2 and FMA, chosen at run time, and live in a package of
// their own because a package that uses cgo (package engine in the -tags
// openblas build) cannot hold Go assembly. Elsewhere, and with -tags
// purego, they handle nothing and callers fall back to their Go loops.
//
// It also holds the plain-Go float32 elementary functions the kernels
// match bitwise (ExpNeg32, Exp32, Log1pExpNeg32, Tanh32, Sigmoid32,
// Softplus32) and their slice forms, shared by the training graphs and the
// graph-free forward passes, so that both compute an activation the same
// way.
package vec
