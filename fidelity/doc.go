// Package fidelity says how like real records a set of synthetic ones
// is, and whether they copy the training rows: per column, the two-sample
// Kolmogorov-Smirnov statistic for numbers and the total variation
// distance for categories and booleans; for pairs of columns, the mean
// absolute difference of their correlation matrices; the Fréchet distance
// between Gaussians fitted to both sets; and the distance of
// each synthetic row to its nearest training row beside the same distance
// for held-out real rows. Compare computes every figure for the synthetic
// rows and for a baseline that samples each column on its own from the
// training rows (which keeps every column's distribution and loses every
// relation between columns), so a generator's figures can be read
// against it.
package fidelity
