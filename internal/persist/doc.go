// Package persist moves parameters, optimiser state and generator state in
// and out of model files for ae, vae and gan.
package persist
