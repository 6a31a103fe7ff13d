// Package report draws the figures a person would rather look at than
// read: training curves, the anomaly-score histogram with its threshold, a
// 2-D latent scatter coloured by label, and grids of image samples or
// reconstructions, tied together by one HTML page with the run's settings.
// Plots use gonum/plot; image grids are plain PNG.
package report
