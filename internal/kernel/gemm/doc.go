// Package gemm is quern's float32 matrix product: packed panels, a 6x16
// register-blocked micro-kernel in AVX2/FMA assembly on amd64 CPUs that
// have it, a 6x32 one over pairs of panels in AVX-512 where the CPU has
// that (both detected at run time; they give bitwise the same results), a
// 6x16 NEON kernel on arm64 (bitwise the same as the Go kernel there; its
// correctness is tested under qemu, its speed has not been measured on
// arm64 hardware), a portable Go kernel elsewhere (or with -tags purego), and a split of the
// work across GOMAXPROCS goroutines for large products. Products of up to
// 512 rows (a batch) pack A once and share out column panels; larger ones
// share out blocks of rows; one to three rows (up to five where B is
// small), as in a scoring request, skip packing and run each row past B
// directly, with the same arithmetic per element. Results do not depend on the thread count or on how many rows
// are computed together. SgemmThen hands finished blocks of the product to
// a Finisher (bias and activation, in quern).
// It is plugged into gorgonia's BLAS hook by package engine; every other
// routine still comes from gonum.
package gemm
