// Package scratch holds the reusable buffers of the models' graph-free
// passes: a typed pool of per-goroutine workspaces and slice growth.
package scratch
