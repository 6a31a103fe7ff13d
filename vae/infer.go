package vae

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sort"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/internal/scratch"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
)

// work is one goroutine's scratch space for graph-free inference.
type work struct {
	ws1, ws2 layers.Workspace
	in       []float32
	z        []float32
	grad     []float32
	pcg      *rand.PCG
	rng      *rand.Rand
}

func newWork() *work {
	w := &work{pcg: rand.NewPCG(0, 0)}
	w.rng = rand.New(w.pcg)
	return w
}

// EncodeInto writes the posterior means of raw rows into dst (grown if too
// short). For float32 models it allocates nothing in steady state.
func (m *Model) EncodeInto(dst, x []float32, rows int) ([]float32, error) {
	if m.cfg.Precision != layers.Float32 {
		r, err := m.Encode(x, rows)
		if err != nil {
			return nil, err
		}
		return append(dst[:0], r...), nil
	}
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	w.in = scratch.Grow(w.in, len(x))
	copy(w.in, x)
	if m.Scaler != nil {
		m.Scaler.ApplyRows(w.in)
	}
	h, err := m.Encoder.Forward32(w.in, rows, &w.ws1)
	if err != nil {
		return nil, err
	}
	L := m.cfg.Latent
	dst = scratch.Grow(dst, rows*L)
	for r := 0; r < rows; r++ {
		copy(dst[r*L:(r+1)*L], h[r*2*L:r*2*L+L])
	}
	return dst, modelio.Finite(Kind, "code", dst, L)
}

// decodeInto32 decodes float32 latent rows into dst with w's buffers.
func (m *Model) decodeInto32(w *work, dst, z []float32, rows int) ([]float32, error) {
	out, err := m.Decoder.Forward32(z, rows, &w.ws2)
	if err != nil {
		return nil, err
	}
	dst = scratch.Grow(dst, len(out))
	copy(dst, out)
	if m.cfg.Likelihood == Bernoulli {
		for i, v := range dst {
			dst[i] = float32(layers.Sigmoid.Eval(float64(v), 0))
		}
	}
	categoryMeans(m, dst)
	if m.Scaler != nil {
		m.Scaler.InvertRows(dst)
	}
	return dst, modelio.Finite(Kind, "decoded row", dst, m.cfg.Inputs)
}

// DecodeInto is Decode writing into dst (grown if too short); no
// allocation in steady state for float32 models.
func (m *Model) DecodeInto(dst, z []float32, rows int) ([]float32, error) {
	if m.cfg.Precision != layers.Float32 {
		r, err := m.Decode(z, rows)
		if err != nil {
			return nil, err
		}
		return append(dst[:0], r...), nil
	}
	if err := checkRows(z, rows, m.cfg.Latent, "latent"); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	return m.decodeInto32(w, dst, z, rows)
}

// SampleInto is Sample writing into dst (grown if too short); no
// allocation in steady state for float32 models.
func (m *Model) SampleInto(dst []float32, n int, seed uint64) ([]float32, error) {
	if n < 0 {
		return nil, fmt.Errorf("vae: sample count %d", n)
	}
	if m.cfg.Precision != layers.Float32 || m.table() != nil {
		r, err := m.Sample(n, seed)
		if err != nil {
			return nil, err
		}
		return append(dst[:0], r...), nil
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	w.pcg.Seed(seed, stream.PriorSample)
	w.z = scratch.Grow(w.z, n*m.cfg.Latent)
	for i := range w.z {
		w.z[i] = float32(w.rng.NormFloat64())
	}
	return m.decodeInto32(w, dst, w.z, n)
}

func checkRows(x []float32, rows, cols int, what string) error {
	if err := data.CheckRows(x, rows, cols, what); err != nil {
		return fmt.Errorf("vae: %w", err)
	}
	return nil
}

// forward runs net on float64 rows and returns float64 results (a new
// slice), in the model's precision.
func (m *Model) forward(ws *layers.Workspace, net *layers.MLP, in []float64, rows int) ([]float64, error) {
	return layers.Run(net, in, rows, ws, nil)
}

// scaled returns x scaled by the model's scaler, as float64.
func (m *Model) scaled(x []float32) []float64 {
	s := append([]float32(nil), x...)
	if m.Scaler != nil {
		m.Scaler.ApplyRows(s)
	}
	r := make([]float64, len(s))
	for i, v := range s {
		r[i] = float64(v)
	}
	return r
}

// posterior returns the means and log-variances of q(z|x) for scaled rows.
func (m *Model) posterior(w *work, xs []float64, rows int) (mu, lv []float64, err error) {
	h, err := m.forward(&w.ws1, m.Encoder, xs, rows)
	if err != nil {
		return nil, nil, err
	}
	L := m.cfg.Latent
	mu, lv = make([]float64, rows*L), make([]float64, rows*L)
	for r := 0; r < rows; r++ {
		copy(mu[r*L:(r+1)*L], h[r*2*L:r*2*L+L])
		copy(lv[r*L:(r+1)*L], h[r*2*L+L:(r+1)*2*L])
	}
	return mu, lv, nil
}

// EncodeFull returns the posterior means and log-variances of raw rows.
func (m *Model) EncodeFull(x []float32, rows int) (mu, logvar []float64, err error) {
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	return m.posterior(w, m.scaled(x), rows)
}

// Encode returns the posterior means of raw rows: their embeddings.
func (m *Model) Encode(x []float32, rows int) ([]float32, error) {
	if m.cfg.Precision == layers.Float32 {
		return m.EncodeInto(nil, x, rows)
	}
	mu, _, err := m.EncodeFull(x, rows)
	if err != nil {
		return nil, err
	}
	codes := to32(mu)
	return codes, modelio.Finite(Kind, "code", codes, m.cfg.Latent)
}

func to32(v []float64) []float32 {
	r := make([]float32, len(v))
	for i, x := range v {
		r[i] = float32(x)
	}
	return r
}

// decodeMean maps latent rows to the decoder's mean in scaled space
// (probabilities for Bernoulli).
func (m *Model) decodeMean(w *work, z []float64, rows int) ([]float64, error) {
	out, err := m.forward(&w.ws2, m.Decoder, z, rows)
	if err != nil {
		return nil, err
	}
	if m.cfg.Likelihood == Bernoulli {
		for i, v := range out {
			out[i] = layers.Sigmoid.Eval(v, 0)
		}
	}
	categoryMeans(m, out)
	return out, nil
}

// categoryMeans replaces each category's logits in decoded rows (scaled
// space) by its levels' probabilities and a table model's booleans'
// log-odds by their probabilities, scaled like the inputs.
func categoryMeans[T float32 | float64](m *Model, out []T) {
	cats, d := m.cfg.Categories, m.cfg.Inputs
	s := m.Scaler
	if t := m.table(); t != nil {
		// a boolean's log-odds: its probability, scaled
		for j, k := range t.kind {
			if k != tabBool {
				continue
			}
			for r := 0; r+d <= len(out); r += d {
				p := 1 / (1 + math.Exp(-float64(out[r+j])))
				if s != nil && j < len(s.Factor) {
					p = (p - s.Offset[j]) * s.Factor[j]
				}
				out[r+j] = T(p)
			}
		}
	}
	if t := m.table(); t != nil && t.ind != nil {
		// a table likelihood leaves the indicators out: their outputs
		// are untrained, and a decoded row has no missing cell
		for r := 0; r+d <= len(out); r += d {
			for _, i := range t.ind {
				if i >= 0 {
					out[r+i] = T(scaledZero(s, i))
				}
			}
		}
	}
	if len(cats) == 0 {
		return
	}
	for r := 0; r+d <= len(out); r += d {
		row := out[r : r+d]
		for _, sp := range cats {
			mx := math.Inf(-1)
			for k := sp[0]; k < sp[1]; k++ {
				mx = math.Max(mx, float64(row[k]))
			}
			var z float64
			for k := sp[0]; k < sp[1]; k++ {
				z += math.Exp(float64(row[k]) - mx)
			}
			for k := sp[0]; k < sp[1]; k++ {
				p := math.Exp(float64(row[k])-mx) / z
				if s != nil && k < len(s.Factor) {
					p = (p - s.Offset[k]) * s.Factor[k]
				}
				row[k] = T(p)
			}
		}
	}
}

func (m *Model) toRaw(v []float64) []float32 {
	r := to32(v)
	if m.Scaler != nil {
		m.Scaler.InvertRows(r)
	}
	return r
}

// Decode maps latent rows (Latent columns each) to the mean of p(x|z) in
// raw units.
func (m *Model) Decode(z []float32, rows int) ([]float32, error) {
	if err := checkRows(z, rows, m.cfg.Latent, "latent"); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	zz := make([]float64, len(z))
	for i, v := range z {
		zz[i] = float64(v)
	}
	out, err := m.decodeMean(w, zz, rows)
	if err != nil {
		return nil, err
	}
	raw := m.toRaw(out)
	return raw, modelio.Finite(Kind, "decoded row", raw, m.cfg.Inputs)
}

// Reconstruct decodes the posterior means of raw rows.
func (m *Model) Reconstruct(x []float32, rows int) ([]float32, error) {
	z, err := m.Encode(x, rows)
	if err != nil {
		return nil, err
	}
	return m.Decode(z, rows)
}

// SampleLatent draws n latent rows from the prior N(0, I) with a
// generator seeded by seed.
func (m *Model) SampleLatent(n int, seed uint64) []float32 {
	rng := rand.New(rand.NewPCG(seed, stream.PriorSample))
	z := make([]float32, n*m.cfg.Latent)
	for i := range z {
		z[i] = float32(rng.NormFloat64())
	}
	return z
}

// Sample draws n rows from the model: z from the prior, then the decoder's
// mean, in raw units; for a model with a table likelihood (see table.go),
// a row drawn from the likelihood given z instead: a level of each
// category from its softmax, a boolean true with its probability, each
// number its mean plus the likelihood's noise, no missing cell; with
// Marginals, the levels' and booleans' log-odds shifted, each number
// mapped onto the training rows' quantiles and cells missing at the
// training rows' rates. The same seed gives the same samples.
func (m *Model) Sample(n int, seed uint64) ([]float32, error) {
	if n < 0 {
		return nil, fmt.Errorf("vae: sample count %d", n)
	}
	if t := m.table(); t != nil {
		return m.sampleTable(t, n, seed)
	}
	return m.Decode(m.SampleLatent(n, seed), n)
}

// scaledZero is input j's 0 in scaled space.
func scaledZero(s *data.Scaler, j int) float64 {
	if s == nil || j >= len(s.Offset) {
		return 0
	}
	return -s.Offset[j] * s.Factor[j]
}

// sampleTable is Sample for a table likelihood t.
func (m *Model) sampleTable(t *tableLik, n int, seed uint64) ([]float32, error) {
	return m.sampleTableWith(t, n, seed, m.Marginals, false)
}

// sampleTableWith is sampleTable with the marginal maps mg (nil: none);
// with probs, a category's levels and a boolean hold their probabilities
// instead of a draw (for FitMarginals' shares, without the draws' noise).
func (m *Model) sampleTableWith(t *tableLik, n int, seed uint64, mg *Marginals, probs bool) ([]float32, error) {
	z := m.SampleLatent(n, seed)
	zz := make([]float64, len(z))
	for i, v := range z {
		zz[i] = float64(v)
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	out, err := m.forward(&w.ws2, m.Decoder, zz, n)
	if err != nil {
		return nil, err
	}
	rng := rand.New(rand.NewPCG(seed, stream.ObservationDraws))
	d := m.cfg.Inputs
	p := make([]float64, d)
	for r := 0; r < n; r++ {
		row := out[r*d : (r+1)*d]
		for j, k := range t.kind {
			switch {
			case k == tabBool:
				// a boolean: true with the probability its log-odds give
				l := row[j]
				if mg != nil && j < len(mg.Shift) {
					l += mg.Shift[j]
				}
				pt, v := 1/(1+math.Exp(-l)), 0.0
				if rng.Float64() < pt {
					v = 1
				}
				if probs {
					v = pt
				}
				if s := m.Scaler; s != nil && j < len(s.Factor) {
					v = (v - s.Offset[j]) * s.Factor[j]
				}
				row[j] = v
			case k == tabGauss:
				row[j] += math.Exp(0.5*t.lv[j]) * rng.NormFloat64()
			case k == tabIndicator:
				row[j] = scaledZero(m.Scaler, j)
				if mg != nil && mg.Missing != nil && rng.Float64() < mg.Missing[j] {
					row[j] = 1
					if s := m.Scaler; s != nil && j < len(s.Factor) {
						row[j] = (1 - s.Offset[j]) * s.Factor[j]
					}
				}
			}
		}
		for _, s := range t.spans {
			if mg != nil && len(mg.Shift) == d {
				for k := s[0]; k < s[1]; k++ {
					row[k] += mg.Shift[k]
				}
			}
			mx := math.Inf(-1)
			for k := s[0]; k < s[1]; k++ {
				mx = math.Max(mx, row[k])
			}
			var zsum float64
			for k := s[0]; k < s[1]; k++ {
				p[k] = math.Exp(row[k] - mx)
				zsum += p[k]
			}
			u := rng.Float64() * zsum
			level := s[1] - 1
			for k := s[0]; k < s[1]; k++ {
				if u < p[k] {
					level = k
					break
				}
				u -= p[k]
			}
			for k := s[0]; k < s[1]; k++ {
				v := 0.0
				if k == level {
					v = 1
				}
				if probs {
					v = p[k] / zsum
				}
				if m.Scaler != nil && k < len(m.Scaler.Factor) {
					v = (v - m.Scaler.Offset[k]) * m.Scaler.Factor[k]
				}
				row[k] = v
			}
		}
	}
	raw := m.toRaw(out)
	if mg != nil {
		mg.mapNumbers(raw, d)
	}
	return raw, modelio.Finite(Kind, "sampled row", raw, d)
}

// Path is an interpolation method.
type Path string

const (
	// Lerp moves along the straight line between two codes.
	Lerp Path = "linear"
	// Slerp moves along the great circle between two codes, scaling the
	// norm linearly; it keeps intermediate codes at norms typical of the
	// prior.
	Slerp Path = "spherical"
)

// InterpolateLatent returns steps codes from a to b inclusive (steps >= 2).
func InterpolateLatent(a, b []float32, steps int, path Path) ([]float32, error) {
	if len(a) != len(b) || len(a) == 0 {
		return nil, fmt.Errorf("vae: interpolate between codes of %d and %d values", len(a), len(b))
	}
	if steps < 2 {
		return nil, fmt.Errorf("vae: interpolation needs at least 2 steps, got %d", steps)
	}
	if path != Lerp && path != Slerp {
		return nil, fmt.Errorf("vae: unknown interpolation path %q", path)
	}
	d := len(a)
	out := make([]float32, steps*d)
	var na, nb, dot float64
	for i := range a {
		na += float64(a[i]) * float64(a[i])
		nb += float64(b[i]) * float64(b[i])
		dot += float64(a[i]) * float64(b[i])
	}
	na, nb = math.Sqrt(na), math.Sqrt(nb)
	omega := 0.0
	if na > 0 && nb > 0 {
		omega = math.Acos(math.Max(-1, math.Min(1, dot/(na*nb))))
	}
	for s := 0; s < steps; s++ {
		t := float64(s) / float64(steps-1)
		row := out[s*d : (s+1)*d]
		if path == Lerp || omega < 1e-6 || math.Abs(omega-math.Pi) < 1e-6 {
			for i := range row {
				row[i] = float32((1-t)*float64(a[i]) + t*float64(b[i]))
			}
			continue
		}
		ca := math.Sin((1-t)*omega) / math.Sin(omega)
		cb := math.Sin(t*omega) / math.Sin(omega)
		// great-circle direction between the unit vectors, norm moved
		// linearly from |a| to |b|
		norm := (1-t)*na + t*nb
		for i := range row {
			row[i] = float32(norm * (ca*float64(a[i])/na + cb*float64(b[i])/nb))
		}
	}
	return out, nil
}

// Interpolate encodes two raw rows to their posterior means, interpolates
// steps codes between them and decodes each, returning steps raw rows.
func (m *Model) Interpolate(a, b []float32, steps int, path Path) ([]float32, error) {
	za, err := m.Encode(a, 1)
	if err != nil {
		return nil, err
	}
	zb, err := m.Encode(b, 1)
	if err != nil {
		return nil, err
	}
	z, err := InterpolateLatent(za, zb, steps, path)
	if err != nil {
		return nil, err
	}
	return m.Decode(z, steps)
}

// Traverse encodes one raw row, then decodes copies of its code with
// latent dimension dim set to each of values in turn, holding the others.
func (m *Model) Traverse(x []float32, dim int, values []float64) ([]float32, error) {
	if dim < 0 || dim >= m.cfg.Latent {
		return nil, fmt.Errorf("vae: latent dimension %d outside [0, %d)", dim, m.cfg.Latent)
	}
	z, err := m.Encode(x, 1)
	if err != nil {
		return nil, err
	}
	L := m.cfg.Latent
	zs := make([]float32, len(values)*L)
	for i, v := range values {
		copy(zs[i*L:], z)
		zs[i*L+dim] = float32(v)
	}
	return m.Decode(zs, len(values))
}

// Neighbour is a row found by Index.Nearest.
type Neighbour struct {
	Row      int
	Distance float64
}

// Index holds the embeddings of a set of rows for nearest-neighbour search
// in latent space (exact, Euclidean). It is safe for concurrent use.
type Index struct {
	m      *Model
	codes  []float32
	rows   int
	latent int
}

// NewIndex embeds rows of x (raw) into an index.
func (m *Model) NewIndex(x []float32, rows int) (*Index, error) {
	c, err := m.Encode(x, rows)
	if err != nil {
		return nil, err
	}
	return &Index{m: m, codes: c, rows: rows, latent: m.cfg.Latent}, nil
}

// Nearest returns the k indexed rows closest to the raw query row, nearest
// first (ties by row number).
func (ix *Index) Nearest(query []float32, k int) ([]Neighbour, error) {
	q, err := ix.m.Encode(query, 1)
	if err != nil {
		return nil, err
	}
	all := make([]Neighbour, ix.rows)
	for r := range all {
		var d float64
		for j, v := range ix.codes[r*ix.latent : (r+1)*ix.latent] {
			e := float64(v) - float64(q[j])
			d += e * e
		}
		all[r] = Neighbour{Row: r, Distance: math.Sqrt(d)}
	}
	sort.SliceStable(all, func(a, b int) bool { return all[a].Distance < all[b].Distance })
	return all[:min(k, len(all))], nil
}

// logLik returns log p(x|z) for each of rows scaled rows xs given decoder
// outputs out (logits or means), in nats.
func (m *Model) logLik(xs, out []float64, rows int) []float64 {
	d := m.cfg.Inputs
	res := make([]float64, rows)
	if t := m.table(); t != nil {
		for r := range res {
			res[r] = rowLogLik(t, xs[r*d:(r+1)*d], out[r*d:(r+1)*d], nil)
		}
		return res
	}
	for r := 0; r < rows; r++ {
		var s float64
		for j := 0; j < d; j++ {
			x, o := xs[r*d+j], out[r*d+j]
			if m.cfg.Likelihood == Bernoulli {
				s -= losses.BCEWithLogitsElem(o, x)
			} else {
				s -= losses.GaussianNLLElem(x, o, m.logVarAt(j))
			}
		}
		res[r] = s + m.jacobian()
	}
	return res
}

func (m *Model) logVarAt(j int) float64 {
	switch m.cfg.Likelihood {
	case Gaussian:
		return math.Log(m.cfg.OutputVariance)
	case GaussianShared:
		return m.LogVar.At(0)
	case GaussianLearned:
		return m.LogVar.At(j)
	}
	return 0
}

// jacobian is log|det| of the scaler's map, so that Gaussian densities are
// reported for raw units.
func (m *Model) jacobian() float64 {
	if m.cfg.Likelihood == Bernoulli || m.Scaler == nil {
		return 0
	}
	var s float64
	for _, f := range m.Scaler.Factor {
		s += math.Log(math.Abs(f))
	}
	return s
}

// draws samples z = mu + sigma*eps for every row, samples per row, and
// returns z with the matching eps.
func draws(x []float32, mu, lv []float64, rows, latent, samples int, seed, streamID uint64) (z, eps []float64) {
	// each row's draws come from a generator seeded by the seed and the
	// row's own values: a row's estimate never depends on the rows scored
	// with it (a file scored in chunks, a request to the server and a
	// whole file agree row for row), while different rows still get
	// independent draws, so averages over rows keep their precision
	cols := len(x) / max(rows, 1)
	z = make([]float64, rows*samples*latent)
	eps = make([]float64, len(z))
	var pcg rand.PCG
	rng := rand.New(&pcg)
	for r := 0; r < rows; r++ {
		pcg.Seed(seed, streamID^rowHash(x[r*cols:(r+1)*cols]))
		for s := 0; s < samples; s++ {
			for j := 0; j < latent; j++ {
				k := (r*samples+s)*latent + j
				e := rng.NormFloat64()
				eps[k] = e
				z[k] = mu[r*latent+j] + math.Exp(0.5*lv[r*latent+j])*e
			}
		}
	}
	return z, eps
}

// rowHash is the 64-bit FNV-1a hash of a row's float32 bit patterns
// (Fowler, Noll and Vo; the offset basis and prime of the published
// algorithm).
func rowHash(row []float32) uint64 {
	h := uint64(14695981039346656037)
	for _, v := range row {
		b := math.Float32bits(v)
		for i := 0; i < 4; i++ {
			h ^= uint64(b & 0xff)
			h *= 1099511628211
			b >>= 8
		}
	}
	return h
}

func repeatRows(x []float64, rows, cols, times int) []float64 {
	out := make([]float64, rows*times*cols)
	for r := 0; r < rows; r++ {
		for s := 0; s < times; s++ {
			copy(out[(r*times+s)*cols:], x[r*cols:(r+1)*cols])
		}
	}
	return out
}

// draw encodes raw rows, draws samples reparameterised latent vectors per
// row from a generator seeded by (seed, streamID) and the row's values, and returns the posterior
// parameters, the draws with their eps, and log p(x|z) for each draw.
type draw struct {
	mu, lv, z, eps, logLik []float64
}

func (m *Model) draw(x []float32, rows, samples int, seed, streamID uint64) (*draw, error) {
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, err
	}
	w := m.pool.Get()
	defer m.pool.Put(w)
	xs := m.scaled(x)
	mu, lv, err := m.posterior(w, xs, rows)
	if err != nil {
		return nil, err
	}
	z, eps := draws(x, mu, lv, rows, m.cfg.Latent, samples, seed, streamID)
	out, err := m.forward(&w.ws2, m.Decoder, z, rows*samples)
	if err != nil {
		return nil, err
	}
	ll := m.logLik(repeatRows(xs, rows, m.cfg.Inputs, samples), out, rows*samples)
	return &draw{mu: mu, lv: lv, z: z, eps: eps, logLik: ll}, nil
}

// ELBO returns each raw row's evidence lower bound in nats,
// E_q[log p(x|z)] - KL(q(z|x) || p(z)), with the expectation estimated from
// samples reparameterised draws (seeded) and the KL in closed form. For
// Gaussian likelihoods the density is for raw units (the scaler's Jacobian
// is included).
func (m *Model) ELBO(x []float32, rows, samples int, seed uint64) ([]float64, error) {
	if samples < 1 {
		return nil, fmt.Errorf("vae: ELBO needs at least 1 sample")
	}
	if m.fastBounds() {
		return m.bound32(x, rows, samples, seed, stream.ELBODraws, false)
	}
	return m.elboRef(x, rows, samples, seed)
}

// elboRef is ELBO on the reference path: float64 draws and likelihoods,
// all rows at once.
func (m *Model) elboRef(x []float32, rows, samples int, seed uint64) ([]float64, error) {
	d, err := m.draw(x, rows, samples, seed, stream.ELBODraws)
	if err != nil {
		return nil, err
	}
	L := m.cfg.Latent
	res := make([]float64, rows)
	for r := range res {
		var s float64
		for k := 0; k < samples; k++ {
			s += d.logLik[r*samples+k]
		}
		var kl float64
		for j := 0; j < L; j++ {
			kl += losses.KLStdNormalElem(d.mu[r*L+j], d.lv[r*L+j])
		}
		res[r] = s/float64(samples) - kl
	}
	return res, nil
}

// IWAE returns each raw row's importance-weighted bound with k samples
// (Burda et al. 2016): log (1/k) sum_i p(x, z_i)/q(z_i|x), computed with a
// stable log-mean-exp. It rises toward log p(x) as k grows, and k = 1 is an
// unbiased single-sample ELBO estimate.
func (m *Model) IWAE(x []float32, rows, k int, seed uint64) ([]float64, error) {
	if k < 1 {
		return nil, fmt.Errorf("vae: IWAE needs k >= 1")
	}
	if m.fastBounds() {
		return m.bound32(x, rows, k, seed, stream.IWAEDraws, true)
	}
	return m.iwaeRef(x, rows, k, seed)
}

// iwaeRef is IWAE on the reference path.
func (m *Model) iwaeRef(x []float32, rows, k int, seed uint64) ([]float64, error) {
	d, err := m.draw(x, rows, k, seed, stream.IWAEDraws)
	if err != nil {
		return nil, err
	}
	L := m.cfg.Latent
	res := make([]float64, rows)
	lw := make([]float64, k)
	for r := range res {
		for s := 0; s < k; s++ {
			var lp, lq float64
			for j := 0; j < L; j++ {
				q := (r*k+s)*L + j
				lp -= losses.StdNormalNLLElem(d.z[q])
				lq -= losses.ReparamNLLElem(d.eps[q], d.lv[r*L+j])
			}
			lw[s] = d.logLik[r*k+s] + lp - lq
		}
		res[r] = LogMeanExp(lw)
	}
	return res, nil
}

// LogMeanExp is log((1/n) sum exp(v_i)), computed by subtracting the
// maximum first so that it neither overflows nor underflows.
func LogMeanExp(v []float64) float64 {
	mx := math.Inf(-1)
	for _, x := range v {
		mx = math.Max(mx, x)
	}
	if math.IsInf(mx, 0) {
		return mx
	}
	var s float64
	for _, x := range v {
		s += math.Exp(x - mx)
	}
	return mx + math.Log(s/float64(len(v)))
}

// ActiveUnitThreshold is the variance of a latent unit's posterior mean
// over the data above which the unit counts as active (Burda et al. 2016).
const ActiveUnitThreshold = 0.01

// ActiveUnits returns how many latent units are active on raw rows x, and
// the variance over the rows of each unit's posterior mean.
func (m *Model) ActiveUnits(x []float32, rows int) (int, []float64, error) {
	if rows < 2 {
		return 0, nil, fmt.Errorf("vae: active units need at least 2 rows")
	}
	mu, _, err := m.EncodeFull(x, rows)
	if err != nil {
		return 0, nil, err
	}
	L := m.cfg.Latent
	v := make([]float64, L)
	for j := 0; j < L; j++ {
		var mean float64
		for r := 0; r < rows; r++ {
			mean += mu[r*L+j]
		}
		mean /= float64(rows)
		for r := 0; r < rows; r++ {
			d := mu[r*L+j] - mean
			v[j] += d * d
		}
		v[j] /= float64(rows - 1)
	}
	n := 0
	for _, x := range v {
		if x > ActiveUnitThreshold {
			n++
		}
	}
	return n, v, nil
}

// KLPerDim returns the KL of q(z|x) from the prior per latent dimension,
// averaged over raw rows x.
func (m *Model) KLPerDim(x []float32, rows int) ([]float64, error) {
	mu, lv, err := m.EncodeFull(x, rows)
	if err != nil {
		return nil, err
	}
	L := m.cfg.Latent
	k := make([]float64, L)
	for i := range mu {
		k[i%L] += losses.KLStdNormalElem(mu[i], lv[i]) / float64(rows)
	}
	return k, nil
}
