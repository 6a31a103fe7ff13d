package vae

import (
	"math"

	"github.com/quernlab/quern/internal/kernel/vec"
	"github.com/quernlab/quern/internal/scratch"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
)

// boundDraws is how many draws (rows x samples) the float32 path pushes
// through the decoder in one matrix product: memory stays at that many
// decoded rows whatever the number of rows scored.
const boundDraws = 2048

// bound32 is ELBO (iwae false) or IWAE (iwae true) for float32 models on
// the fast path: rows in chunks of boundDraws/samples, the encoder and
// the decoder through the float32 matrix product with every draw of a
// chunk in one product, the likelihood summed in float64 per draw. The
// draws are those of the reference path (the same generator per row), so
// the two agree to float32 rounding (TestFastBoundsMatchReference states
// the tolerance).
func (m *Model) bound32(x []float32, rows, samples int, seed, streamID uint64, iwae bool) ([]float64, error) {
	if err := checkRows(x, rows, m.cfg.Inputs, "input"); err != nil {
		return nil, err
	}
	D, L := m.cfg.Inputs, m.cfg.Latent
	w := m.pool.Get()
	defer m.pool.Put(w)
	chunk := max(1, boundDraws/samples)
	res := make([]float64, rows)
	jac := m.jacobian()
	// per-column inverse variances and the constant part of the Gaussian
	// log-density, log(2 pi) + log var, summed over columns
	// (in float64: a tiny variance's inverse overflows float32)
	var inv []float64
	var gaussConst float64
	tab := m.table()
	if m.cfg.Likelihood != Bernoulli && tab == nil {
		inv = make([]float64, D)
		for j := range inv {
			lv := m.logVarAt(j)
			inv[j] = math.Exp(-lv)
			gaussConst += losses.Log2Pi + lv
		}
	}
	lw := make([]float64, samples)
	eps := make([]float64, chunk*samples*L)
	for lo := 0; lo < rows; lo += chunk {
		hi := min(rows, lo+chunk)
		n := hi - lo
		w.in = scratch.Grow(w.in, n*D)
		copy(w.in, x[lo*D:hi*D])
		if m.Scaler != nil {
			m.Scaler.ApplyRows(w.in)
		}
		h, err := m.Encoder.Forward32(w.in, n, &w.ws1)
		if err != nil {
			return nil, err
		}
		w.z = scratch.Grow(w.z, n*samples*L)
		for r := 0; r < n; r++ {
			w.pcg.Seed(seed, streamID^rowHash(x[(lo+r)*D:(lo+r+1)*D]))
			mu, lv := h[r*2*L:r*2*L+L], h[r*2*L+L:(r+1)*2*L]
			for s := 0; s < samples; s++ {
				for j := 0; j < L; j++ {
					k := (r*samples+s)*L + j
					e := w.rng.NormFloat64()
					eps[k] = e
					w.z[k] = float32(float64(mu[j]) + math.Exp(0.5*float64(lv[j]))*e)
				}
			}
		}
		out, err := m.Decoder.Forward32(w.z, n*samples, &w.ws2)
		if err != nil {
			return nil, err
		}
		for r := 0; r < n; r++ {
			xs := w.in[r*D : (r+1)*D]
			mu, lv := h[r*2*L:r*2*L+L], h[r*2*L+L:(r+1)*2*L]
			var kl float64
			for j := 0; j < L; j++ {
				kl += losses.KLStdNormalElem(float64(mu[j]), float64(lv[j]))
			}
			var sum float64
			for s := 0; s < samples; s++ {
				o := out[(r*samples+s)*D : (r*samples+s+1)*D]
				var ll float64
				switch {
				case tab != nil:
					ll = rowLogLik(tab, xs, o, nil)
				case inv == nil:
					ll = -bceSum(w, o, xs) + jac
				default:
					ll = -0.5*(gaussConst+weightedSq(o, xs, inv)) + jac
				}
				if !iwae {
					sum += ll
					continue
				}
				var lp, lq float64
				for j := 0; j < L; j++ {
					k := (r*samples+s)*L + j
					lp -= losses.StdNormalNLLElem(float64(w.z[k]))
					lq -= losses.ReparamNLLElem(eps[k], float64(lv[j]))
				}
				lw[s] = ll + lp - lq
			}
			if iwae {
				res[lo+r] = LogMeanExp(lw)
			} else {
				res[lo+r] = sum/float64(samples) - kl
			}
		}
	}
	return res, nil
}

// bceSum is the Bernoulli negative log-likelihood of targets y under
// logits o, summed in float64: the vector kernel where the CPU has one,
// the element form for the rest.
func bceSum(w *work, o, y []float32) float64 {
	w.grad = scratch.Grow(w.grad, len(o))
	s, done := vec.BCE(w.grad, o, y)
	for i := done; i < len(o); i++ {
		s += losses.BCEWithLogitsElem(float64(o[i]), float64(y[i]))
	}
	return s
}

// weightedSq is sum_j (x_j - o_j)^2 inv_j in float64.
func weightedSq(o, x []float32, inv []float64) float64 {
	var s float64
	for j := range o {
		d := float64(x[j]) - float64(o[j])
		s += d * d * inv[j]
	}
	return s
}

// fastBounds reports whether ELBO and IWAE take the float32 path.
func (m *Model) fastBounds() bool { return m.cfg.Precision == layers.Float32 }
