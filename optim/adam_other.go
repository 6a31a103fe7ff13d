//go:build !amd64 || purego

package optim

var haveAVX = false

func adam32Fast(w, g, m, v []float32, k adamCoef) { adam32(w, g, m, v, k) }
