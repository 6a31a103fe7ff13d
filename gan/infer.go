package gan

import (
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/quernlab/quern/internal/scratch"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/layers"
)

type work struct {
	ws  layers.Workspace
	in  []float32
	pcg *rand.PCG
	rng *rand.Rand
}

func newWork() *work {
	w := &work{pcg: rand.NewPCG(0, 0)}
	w.rng = rand.New(w.pcg)
	return w
}

// GenerateInto is Generate writing into dst (grown if too short): the same
// rows for the same seed, and no allocation in steady state for float32
// models.
func (m *Model) GenerateInto(dst []float32, n int, seed uint64, class int) ([]float32, error) {
	c := m.cfg
	if c.Precision != layers.Float32 || len(c.Categories) > 0 {
		r, err := m.Generate(n, seed, class)
		if err != nil {
			return nil, err
		}
		return append(dst[:0], r...), nil
	}
	if err := m.checkGenerate(n, class); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	w.pcg.Seed(seed, stream.GeneratorInput)
	width := c.Noise + c.Classes
	w.in = scratch.Grow(w.in, n*width)
	z := w.in
	clear(z)
	for r := 0; r < n; r++ {
		for j := 0; j < c.Noise; j++ {
			z[r*width+j] = float32(w.rng.NormFloat64())
		}
		if c.Classes > 0 {
			k := class
			if k < 0 {
				k = w.rng.IntN(c.Classes)
			}
			z[r*width+c.Noise+k] = 1
		}
	}
	out, err := m.Generator.Forward32(z, n, &w.ws)
	if err != nil {
		return nil, err
	}
	dst = scratch.Grow(dst, len(out))
	copy(dst, out)
	if m.Scaler != nil {
		m.Scaler.InvertRows(dst)
	}
	return dst, nil
}

func (m *Model) checkGenerate(n, class int) error {
	c := m.cfg
	if n < 0 {
		return fmt.Errorf("gan: sample count %d", n)
	}
	if c.Classes > 0 && (class < -1 || class >= c.Classes) {
		return fmt.Errorf("gan: class %d outside -1..%d", class, c.Classes-1)
	}
	if c.Classes == 0 && class > 0 {
		return fmt.Errorf("gan: class %d asked of an unconditional model", class)
	}
	return nil
}

// Generate draws n rows (raw units) from noise seeded by seed. For a
// conditional model, class picks the class of every row, or -1 draws
// classes uniformly.
func (m *Model) Generate(n int, seed uint64, class int) ([]float32, error) {
	c := m.cfg
	if err := m.checkGenerate(n, class); err != nil {
		return nil, err
	}
	if c.Precision == layers.Float32 && len(c.Categories) == 0 {
		return m.GenerateInto(nil, n, seed, class)
	}
	rng := rand.New(rand.NewPCG(seed, stream.GeneratorInput))
	width := c.Noise + c.Classes
	z := make([]float64, n*width)
	for r := 0; r < n; r++ {
		for j := 0; j < c.Noise; j++ {
			z[r*width+j] = rng.NormFloat64()
		}
		if c.Classes > 0 {
			k := class
			if k < 0 {
				k = rng.IntN(c.Classes)
			}
			z[r*width+c.Noise+k] = 1
		}
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	out, err := layers.Run(m.Generator, z, n, &w.ws, nil)
	if err != nil {
		return nil, err
	}
	res := make([]float32, len(out))
	for i, v := range out {
		res[i] = float32(v)
	}
	m.drawLevels(res, n, seed)
	if m.Scaler != nil {
		m.Scaler.InvertRows(res)
	}
	return res, nil
}

// drawLevels replaces each category's logits in generated rows by one
// level drawn from their softmax, as one-hot inputs (the Gumbel-max
// draw: the level with the largest logit plus Gumbel noise), from a
// generator seeded by seed.
func (m *Model) drawLevels(out []float32, n int, seed uint64) {
	cats, d := m.cfg.Categories, m.cfg.Outputs
	if len(cats) == 0 {
		return
	}
	rng := rand.New(rand.NewPCG(seed, stream.ObservationDraws))
	for r := 0; r < n; r++ {
		row := out[r*d : (r+1)*d]
		for _, s := range cats {
			best, bestV := s[0], math.Inf(-1)
			for k := s[0]; k < s[1]; k++ {
				v := float64(row[k]) + gumbel(rng)
				if v > bestV {
					best, bestV = k, v
				}
			}
			for k := s[0]; k < s[1]; k++ {
				row[k] = 0
			}
			row[best] = 1
		}
	}
}

// gumbel draws from the standard Gumbel distribution, -log(-log U).
func gumbel(rng *rand.Rand) float64 {
	u := rng.Float64()
	for u == 0 {
		u = rng.Float64()
	}
	return -math.Log(-math.Log(u))
}

// Sample draws n rows (raw units) from noise seeded by seed; a conditional
// model draws the classes too (Generate with class -1).
func (m *Model) Sample(n int, seed uint64) ([]float32, error) { return m.Generate(n, seed, -1) }

// Discriminate returns the discriminator's probability that each pack of
// raw rows is real (one value per Pack rows; for a Wasserstein critic, the
// critic's raw output). labels is needed by conditional models.
func (m *Model) Discriminate(x []float32, rows int, labels []int) ([]float64, error) {
	c := m.cfg
	if rows < 0 || len(x) != rows*c.Outputs {
		return nil, fmt.Errorf("gan: input has %d values, want %d rows x %d columns", len(x), rows, c.Outputs)
	}
	if rows%c.Pack != 0 {
		return nil, fmt.Errorf("gan: %d rows are not whole packs of %d", rows, c.Pack)
	}
	if c.Classes > 0 && len(labels) != rows {
		return nil, fmt.Errorf("gan: a conditional model needs %d labels, got %d", rows, len(labels))
	}
	s := append([]float32(nil), x...)
	if m.Scaler != nil {
		m.Scaler.ApplyRows(s)
	}
	width := c.Outputs + c.Classes
	in := make([]float64, rows*width)
	for r := 0; r < rows; r++ {
		for j := 0; j < c.Outputs; j++ {
			v := float64(s[r*c.Outputs+j])
			if v-v != 0 {
				return nil, fmt.Errorf("gan: row %d column %d is %v", r+1, j+1, v)
			}
			in[r*width+j] = v
		}
		if c.Classes > 0 {
			if labels[r] < 0 || labels[r] >= c.Classes {
				return nil, fmt.Errorf("gan: row %d has label %d", r+1, labels[r])
			}
			in[r*width+c.Outputs+labels[r]] = 1
		}
	}
	// apply the discriminator layer by layer with spectral scaling
	h, n := in, rows/c.Pack
	convs := m.Discriminator.Front
	for l, cv := range convs {
		w, b := cv.W.Values(), cv.B.Values()
		for i := range w {
			w[i] *= m.SpectralScale[l]
		}
		h, _ = layers.ConvForward(nil, nil, h, w, b, rows, cv.Shape)
		for i, v := range h {
			h[i] = cv.Act.Eval(v, cv.Slope)
		}
	}
	for l, d := range m.Discriminator.Layers {
		l += len(convs)
		out := make([]float64, n*d.Out)
		for r := 0; r < n; r++ {
			for j := 0; j < d.Out; j++ {
				acc := d.B.At(j)
				for i := 0; i < d.In; i++ {
					acc += h[r*d.In+i] * d.W.At(i*d.Out+j) * m.SpectralScale[l]
				}
				out[r*d.Out+j] = d.Act.Eval(acc, d.Slope)
			}
		}
		h = out
	}
	if c.Critic == BCECritic {
		for i, v := range h {
			h[i] = layers.Sigmoid.Eval(v, 0)
		}
	}
	return h, nil
}

// NoiseRows returns the noise Generate feeds an unconditional generator for
// n rows with the given seed (n x dim values), for reproducing its output.
func NoiseRows(n, dim int, seed uint64) []float64 {
	rng := rand.New(rand.NewPCG(seed, stream.GeneratorInput))
	z := make([]float64, n*dim)
	for i := range z {
		z[i] = rng.NormFloat64()
	}
	return z
}
