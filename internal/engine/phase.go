package engine

import (
	"fmt"

	"github.com/quernlab/quern/layers"
)

// BuildFunc builds one graph for a given batch size and returns its scalar
// loss and any outputs to copy out after each run.
type BuildFunc func(g *Graph, batch int) (loss *Node, outputs []*Node)

// Phase owns the compiled programs of one phase of work (a training step,
// an evaluation pass) and builds one per batch size on first use, so a
// final partial batch or a single row works without padding.
type Phase struct {
	prec  layers.Precision
	grad  bool
	wrt   []*layers.Param
	build BuildFunc
	progs map[int]*Program
}

// NewPhase returns a phase whose programs compute gradients when grad is
// true.
func NewPhase(prec layers.Precision, grad bool, build BuildFunc) *Phase {
	return &Phase{prec: prec, grad: grad, build: build, progs: map[int]*Program{}}
}

// Program returns the program for the batch size, building it if needed.
func (ph *Phase) Program(batch int) (*Program, error) {
	if batch <= 0 {
		return nil, fmt.Errorf("engine: batch size %d", batch)
	}
	if p, ok := ph.progs[batch]; ok {
		return p, nil
	}
	g := NewGraph(ph.prec)
	loss, outs := ph.build(g, batch)
	p, err := g.Compile(loss, CompileOptions{Grad: ph.grad, Outputs: outs, Wrt: ph.wrt})
	if err != nil {
		return nil, fmt.Errorf("engine: batch %d: %w", batch, err)
	}
	ph.progs[batch] = p
	return p, nil
}

// Close releases every program.
func (ph *Phase) Close() error {
	var first error
	for b, p := range ph.progs {
		if err := p.Close(); err != nil && first == nil {
			first = err
		}
		delete(ph.progs, b)
	}
	return first
}

// Only limits the gradients of the phase's programs to params (see
// CompileOptions.Wrt). Call it before the first Program.
func (ph *Phase) Only(params []*layers.Param) *Phase {
	ph.wrt = params
	return ph
}
