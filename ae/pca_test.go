package ae_test

import (
	"math"
	"testing"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

func toDense(d *data.Dataset) *mat.Dense {
	m := mat.NewDense(d.Rows, d.Cols, nil)
	for i := 0; i < d.Rows; i++ {
		for j, v := range d.Row(i) {
			m.Set(i, j, float64(v))
		}
	}
	return m
}

// orthonormal returns an orthonormal basis of the columns of a (thin QR).
func orthonormal(a mat.Matrix) *mat.Dense {
	var qr mat.QR
	qr.Factorize(a)
	var q mat.Dense
	qr.QTo(&q)
	_, c := a.Dims()
	return mat.DenseCopyOf(q.Slice(0, q.RawMatrix().Rows, 0, c))
}

// largestPrincipalAngle between the column spaces of a and b (same width),
// from the singular values of Qa' Qb (Björck & Golub 1973).
func largestPrincipalAngle(a, b mat.Matrix) float64 {
	qa, qb := orthonormal(a), orthonormal(b)
	var p mat.Dense
	p.Mul(qa.T(), qb)
	var svd mat.SVD
	svd.Factorize(&p, mat.SVDNone)
	s := svd.Values(nil)
	return math.Acos(math.Min(1, s[len(s)-1]))
}

// A linear autoencoder trained with squared error spans the principal
// subspace (Baldi & Hornik 1989), and its error reaches the best rank-k
// error (Eckart & Young 1936). Principal components from gonum's stat.PC.
func TestLinearAutoencoderFindsPrincipalSubspace(t *testing.T) {
	raw := testenv.BreastCancer(t)
	sc, err := data.Fit(data.ScaleStandard, raw)
	require.NoError(t, err)
	z, err := sc.Apply(raw)
	require.NoError(t, err)
	zm := toDense(z)
	var pc stat.PC
	require.True(t, pc.PrincipalComponents(zm, nil))
	var vecs mat.Dense
	pc.VectorsTo(&vecs)
	n, d := raw.Rows, raw.Cols
	for _, k := range []int{2, 5} {
		t.Run("k="+string(rune('0'+k)), func(t *testing.T) {
			m, err := ae.New(ae.Config{Inputs: d, Hidden: []int{}, Latent: k, Linear: true, Precision: layers.Float64, Seed: 11})
			require.NoError(t, err)
			trainenv.Fit(t, m, raw, nil, train.Settings{Epochs: 1500, BatchSize: n, Optimizer: train.Optimizer{Rate: 0.01}})
			// decoder weight is k x d: its rows span the reconstruction space
			w := m.Decoder.Layers[0].W
			wd := mat.NewDense(k, d, w.Values())
			top := vecs.Slice(0, d, 0, k)
			angle := largestPrincipalAngle(wd.T(), top)
			// optimal rank-k error: residual of projecting onto the top-k PCs
			var scores, proj, resid mat.Dense
			scores.Mul(zm, top)
			proj.Mul(&scores, top.T())
			resid.Sub(zm, &proj)
			opt := mat.Norm(&resid, 2) // Frobenius norm
			optMSE := opt * opt / float64(n*d)
			errs, err := m.RowErrors(raw.X, n)
			require.NoError(t, err)
			var mse float64
			for _, e := range errs {
				mse += e
			}
			mse /= float64(n)
			t.Logf("k=%d largest principal angle %.4f rad, MSE %.5f vs optimal %.5f (%.2f%%)", k, angle, mse, optMSE, 100*(mse/optMSE-1))
			require.Less(t, angle, 0.05)
			require.Less(t, mse, optMSE*1.02)
			require.Greater(t, mse, optMSE*(1-1e-3), "cannot beat the optimum")
		})
	}
}
