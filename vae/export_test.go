package vae

// Reference-path bounds, for the tests of the fast path.
func (m *Model) ELBORef(x []float32, rows, samples int, seed uint64) ([]float64, error) {
	return m.elboRef(x, rows, samples, seed)
}

func (m *Model) IWAERef(x []float32, rows, k int, seed uint64) ([]float64, error) {
	return m.iwaeRef(x, rows, k, seed)
}

// RowLogLik is the table likelihood of one scaled row under decoder
// outputs o.
func (m *Model) RowLogLik(xs, o []float64) float64 { return rowLogLik(m.table(), xs, o, nil) }
