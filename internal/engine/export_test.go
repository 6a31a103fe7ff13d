package engine

import G "gorgonia.org/gorgonia"

// TapeRun runs p's graph once on gorgonia's own tape machine and returns
// the loss and the gradients' values, for comparison with Program.Run.
func TapeRun(p *Program) (float64, [][]float64, error) {
	m := G.NewTapeMachine(p.graph)
	defer m.Close()
	if err := m.RunAll(); err != nil {
		return 0, nil, err
	}
	loss, err := scalarOf(p.lossNode.Value())
	if err != nil {
		return 0, nil, err
	}
	var grads [][]float64
	for _, gn := range p.gradNodes {
		var g []float64
		switch d := gn.Value().Data().(type) {
		case []float32:
			for _, v := range d {
				g = append(g, float64(v))
			}
		case []float64:
			g = append(g, d...)
		}
		grads = append(grads, g)
	}
	return loss, grads, nil
}

// FirstNonFinite exposes firstNonFinite to the tests.
var FirstNonFinite = firstNonFinite

// GraphSgemm is the float32 product the fused operations use in this build.
var GraphSgemm = sgemm
