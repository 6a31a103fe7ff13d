// Package engine is quern's only contact with gorgonia. It builds a graph once
// per phase and batch size (gorgonia's graph and symbolic gradients), binds
// batches by writing straight into the graph's input tensors, runs the
// nodes that the loss, gradients and outputs need with its own executor
// (see exec.go: gorgonia's tape machine costs two thread hand-offs and
// fresh tensors every run) and copies gradients into the parameters' own
// buffers, so that no other package sees Let, RunAll, Reset, dtypes or
// broadcasting patterns. A training step allocates nothing in steady state
// when the graph uses the fused operations.
//
// Graph construction methods record the first error and return a poisoned
// node afterwards; Compile reports that error. This keeps model code linear.
//
// Traps handled here, each observed with gorgonia v0.9.18:
//   - gorgonia's initialisers, GaussianRandomNode and Dropout seed from the
//     clock: parameters are filled by package layers from math/rand/v2 and
//     random inputs (noise, dropout masks) are fed in as ordinary inputs.
//   - gorgonia's tape machine locks the goroutine to its thread and runs
//     the tape on another goroutine, and must be Reset after each RunAll;
//     the executor calls each operation's Do (or, for operations known to
//     overwrite it, UsePreallocDo into the node's own buffer) in order.
//   - Graph construction touches package-level constant nodes (Rectify's
//     zero, for instance): all construction is serialised by buildMu.
//   - Grad may only be called once per graph: Compile calls it once for the
//     whole parameter list.
//   - Gradient values are copied out each run into the parameter's buffer,
//     replacing (not adding to) the previous gradient unless Accumulate is
//     asked for.
package engine
