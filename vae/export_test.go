package vae

// Reference-path bounds, for the tests of the fast path.
func (m *Model) ELBORef(x []float32, rows, samples int, seed uint64) ([]float64, error) {
	return m.elboRef(x, rows, samples, seed)
}

func (m *Model) IWAERef(x []float32, rows, k int, seed uint64) ([]float64, error) {
	return m.iwaeRef(x, rows, k, seed)
}
