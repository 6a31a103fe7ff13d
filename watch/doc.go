// Package watch serves a live page of a training run: the status (epoch,
// step, losses, pace, time left), the curves of every metric per epoch,
// and figures the run renders as it goes (sample grids, score
// histograms), pushed to the browser as server-sent events. It uses the
// standard library's HTTP server only; the page draws its curves itself,
// with no script library.
//
// A Page is safe for concurrent use: the training loop reports to it
// while its handler serves any number of browsers.
package watch
