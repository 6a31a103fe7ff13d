//go:build openblas

package engine

// #cgo LDFLAGS: -lopenblas
import "C"

import (
	"gonum.org/v1/netlib/blas/netlib"
	G "gorgonia.org/gorgonia"
)

// With the openblas build tag every BLAS routine of the graphs, the float32
// matrix product included, comes from OpenBLAS through cgo (Debian:
// libopenblas-dev). It exists for comparison with the default pure-Go
// build.
func init() { G.Use(netlib.Implementation{}) }

// sgemm and dgemm are the matrix products of the fused operations.
var (
	sgemm = netlib.Implementation{}.Sgemm
	dgemm = netlib.Implementation{}.Dgemm
)

// BLASName names the BLAS the graphs use.
func BLASName() string { return "openblas" }
