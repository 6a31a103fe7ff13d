package vae_test

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/optim"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

// ppcaData draws n rows from x = W z + mu + sigma*eps with z ~ N(0, I_q);
// model seeds W and mu, sample seeds the draws.
func ppcaData(n, d, q int, sigma float64, model, sample uint64) *data.Dataset {
	rng := rand.New(rand.NewPCG(model, model))
	w := make([]float64, d*q)
	for i := range w {
		w[i] = rng.NormFloat64()
	}
	mu := make([]float64, d)
	for i := range mu {
		mu[i] = rng.NormFloat64()
	}
	rng = rand.New(rand.NewPCG(model, sample))
	x := make([]float32, n*d)
	for r := 0; r < n; r++ {
		z := []float64{rng.NormFloat64(), rng.NormFloat64()}
		for j := 0; j < d; j++ {
			v := mu[j] + sigma*rng.NormFloat64()
			for k := 0; k < q; k++ {
				v += w[j*q+k] * z[k]
			}
			x[r*d+j] = float32(v)
		}
	}
	ds, _ := data.New(x, n, d)
	return ds
}

// ppcaMaxLogLik is the exact maximum log-likelihood per row of probabilistic
// PCA with q components (Tipping & Bishop 1999, eqs. 4, 7 and 8): with the
// sample covariance's eigenvalues l_1 >= ... >= l_d and
// s2 = mean of l_{q+1..d}, it is -1/2 (d log 2pi + sum_{i<=q} log l_i +
// (d-q) log s2 + d). Eigenvalues from gonum's mat.EigenSym.
func ppcaMaxLogLik(d *data.Dataset, q int) float64 {
	x := mat.NewDense(d.Rows, d.Cols, nil)
	for i := 0; i < d.Rows; i++ {
		for j, v := range d.Row(i) {
			x.Set(i, j, float64(v))
		}
	}
	var cov mat.SymDense
	stat.CovarianceMatrix(&cov, x, nil)
	cov.ScaleSym(float64(d.Rows-1)/float64(d.Rows), &cov) // maximum-likelihood (1/n) form
	var es mat.EigenSym
	es.Factorize(&cov, false)
	l := es.Values(nil)
	sort.Sort(sort.Reverse(sort.Float64Slice(l)))
	var s2 float64
	for _, v := range l[q:] {
		s2 += v
	}
	s2 /= float64(d.Cols - q)
	ll := float64(d.Cols)*math.Log(2*math.Pi) + float64(d.Cols-q)*math.Log(s2) + float64(d.Cols)
	for _, v := range l[:q] {
		ll += math.Log(v)
	}
	return -0.5 * ll
}

func mean(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// A linear VAE with a Gaussian likelihood of one shared learned variance
// recovers probabilistic PCA (Lucas et al. 2019): its ELBO per row comes
// within 1% of pPCA's exact maximum log-likelihood. With more latent units
// than the data's two factors, the two genuine units carry unit variance
// and the surplus units fade toward the prior.
func TestLinearVAERecoversPPCA(t *testing.T) {
	d := ppcaData(2000, 8, 2, 0.5, 3, 1)
	want := ppcaMaxLogLik(d, 2)
	m, err := vae.New(vae.Config{Inputs: 8, Hidden: []int{}, Latent: 4, Linear: true, Likelihood: vae.GaussianShared,
		Scaling: data.ScaleNone, Precision: layers.Float64, Init: layers.HeGlorot, Seed: 2})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 200, BatchSize: 100, Optimizer: train.Optimizer{Rate: 0.02, Schedule: optim.Cosine{Steps: 4000, Min: 0.01}}})
	elbo, err := m.ELBO(d.X, d.Rows, 64, 9)
	require.NoError(t, err)
	got := mean(elbo)
	active, vars, err := m.ActiveUnits(d.X, d.Rows)
	require.NoError(t, err)
	t.Logf("ELBO per row %.4f, pPCA maximum log-likelihood %.4f (%.3f%%); active units %d, variances %.3g", got, want, 100*(got-want)/math.Abs(want), active, vars)
	require.InDelta(t, want, got, 0.01*math.Abs(want))
	sort.Sort(sort.Reverse(sort.Float64Slice(vars)))
	require.GreaterOrEqual(t, active, 2)
	require.Greater(t, vars[1], 0.5)
	require.Less(t, vars[2], 0.1)
}

// ActiveUnits on an encoder set by hand: posterior means mu_j = c_j x_j of
// independent unit-variance inputs have variances c_j^2 (1, 0.0025, 0), so
// exactly one unit exceeds 0.01.
func TestActiveUnitsByHand(t *testing.T) {
	m, err := vae.New(vae.Config{Inputs: 3, Hidden: []int{}, Latent: 3, Linear: true, Likelihood: vae.Gaussian, Scaling: data.ScaleNone, Precision: layers.Float64})
	require.NoError(t, err)
	w := m.Encoder.Layers[0].W // 3 x 6: means then log-variances
	clear(w.F64())
	w.F64()[0*6+0], w.F64()[1*6+1] = 1, 0.05
	rng := rand.New(rand.NewPCG(3, 3))
	x := make([]float32, 3*20000)
	for i := range x {
		x[i] = float32(rng.NormFloat64())
	}
	n, vars, err := m.ActiveUnits(x, 20000)
	require.NoError(t, err)
	require.Equal(t, 1, n)
	require.InDelta(t, 1, vars[0], 0.03)
	require.InDelta(t, 0.0025, vars[1], 0.0001)
	require.Equal(t, 0.0, vars[2])
}

// ELBO <= IWAE(5) <= IWAE(50) on held-out rows (Burda et al. 2016,
// Theorem 1), averaged over rows with seeded sampling.
func TestBoundOrdering(t *testing.T) {
	tr := ppcaData(1500, 8, 2, 0.5, 4, 1)
	te := ppcaData(300, 8, 2, 0.5, 4, 2)
	m, err := vae.New(vae.Config{Inputs: 8, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Activation: layers.Tanh, Seed: 1})
	require.NoError(t, err)
	trainenv.Fit(t, m, tr, nil, train.Settings{Epochs: 20, BatchSize: 50, Optimizer: train.Optimizer{Rate: 5e-3}})
	e, err := m.ELBO(te.X, te.Rows, 50, 1)
	require.NoError(t, err)
	i5, err := m.IWAE(te.X, te.Rows, 5, 2)
	require.NoError(t, err)
	i50, err := m.IWAE(te.X, te.Rows, 50, 3)
	require.NoError(t, err)
	t.Logf("per row: ELBO %.4f <= IWAE(5) %.4f <= IWAE(50) %.4f", mean(e), mean(i5), mean(i50))
	require.Less(t, mean(e), mean(i5))
	require.Less(t, mean(i5), mean(i50))
}

// The KL the model reports equals the losses package's closed form on the
// same posterior parameters.
func TestReportedKLMatchesLosses(t *testing.T) {
	d := ppcaData(300, 8, 2, 0.5, 6, 1)
	m, err := vae.New(vae.Config{Inputs: 8, Hidden: []int{8}, Latent: 3, Likelihood: vae.Gaussian, Seed: 1})
	require.NoError(t, err)
	// validation on the training rows: the figures of the final weights
	h := trainenv.Fit(t, m, d, d, train.Settings{Epochs: 2})
	ms := h.Epochs[1].Validation
	require.Equal(t, "kl", ms[2].Name)
	mu, lv, err := m.EncodeFull(d.X, d.Rows)
	require.NoError(t, err)
	per := make([]float64, 3)
	want, err := losses.KLStdNormal(mu, lv, 3, per)
	require.NoError(t, err)
	// graph (float32) against float64 reference
	require.InDelta(t, want, ms[2].Value, 1e-4*(1+want))
	got, err := m.KLPerDim(d.X, d.Rows)
	require.NoError(t, err)
	// against the closed form written out here (Kingma & Welling 2014,
	// Appendix B): per dimension, the row average of
	// -0.5 (1 + logvar - mu^2 - exp(logvar))
	closed := make([]float64, 3)
	for i, mv := range mu {
		closed[i%3] += -0.5 * (1 + lv[i] - mv*mv - math.Exp(lv[i])) / float64(d.Rows)
	}
	require.InDeltaSlice(t, closed, got, 1e-12)
	require.InDeltaSlice(t, per, got, 1e-12)
}

// On Fashion-MNIST (grey levels as Bernoulli means), a 784-400-20 VAE beats
// the best fully factorised Bernoulli model by a wide margin: that model's
// exact negative log-likelihood uses the per-pixel training means.
func TestFashionMNISTBeatsFactorisedBernoulli(t *testing.T) {
	if testing.Short() {
		t.Skip("short mode")
	}
	tr, te := testenv.Fashion(t, "train"), testenv.Fashion(t, "t10k")
	p := make([]float64, 784)
	for i := 0; i < tr.Rows; i++ {
		for j, v := range tr.Row(i) {
			p[j] += float64(v) / float64(tr.Rows)
		}
	}
	var nll float64
	for i := 0; i < te.Rows; i++ {
		for j, v := range te.Row(i) {
			q := math.Min(math.Max(p[j], 1e-6), 1-1e-6)
			nll -= float64(v)*math.Log(q) + (1-float64(v))*math.Log1p(-q)
		}
	}
	nll /= float64(te.Rows)
	m, err := vae.New(vae.Config{Inputs: 784, Hidden: []int{400}, Latent: 20, Seed: 1})
	require.NoError(t, err)
	trainenv.Fit(t, m, tr, nil, train.Settings{Epochs: 5, BatchSize: 100})
	elbo, err := m.ELBO(te.X, te.Rows, 1, 1)
	require.NoError(t, err)
	negELBO := -mean(elbo)
	t.Logf("test negative ELBO %.1f nats vs factorised Bernoulli NLL %.1f nats", negELBO, nll)
	require.Less(t, negELBO, 0.85*nll)
	// the importance-weighted bound on the first 200 test images
	const k = 200
	iw, err := m.IWAE(te.X[:k*784], k, 50, 2)
	require.NoError(t, err)
	t.Logf("first %d test images: negative ELBO %.1f, negative IWAE(k=50) %.1f nats", k, -mean(elbo[:k]), -mean(iw))
	require.Less(t, -mean(iw), -mean(elbo[:k]))
}

// A row's density score depends on the row and the seed alone: scored
// alone, in a batch, in another order or beside other rows, it is the same
// number, bit for bit (the server scores one request's rows, the command
// line a whole file). Common practice, no source.
func TestRowScoreIndependentOfBatch(t *testing.T) {
	tr := ppcaData(400, 8, 2, 0.5, 4, 1)
	m, err := vae.New(vae.Config{Inputs: 8, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Seed: 1})
	require.NoError(t, err)
	trainenv.Fit(t, m, tr, nil, train.Settings{Epochs: 2, BatchSize: 50})
	all, err := m.NegELBO(tr.X[:20*8], 20)
	require.NoError(t, err)
	rev := make([]float32, 0, 20*8)
	for r := 19; r >= 0; r-- {
		rev = append(rev, tr.X[r*8:(r+1)*8]...)
	}
	back, err := m.NegELBO(rev, 20)
	require.NoError(t, err)
	for r := 0; r < 20; r++ {
		one, err := m.NegELBO(tr.X[r*8:(r+1)*8], 1)
		require.NoError(t, err)
		require.Equal(t, all[r], one[0], "row %d alone", r)
		require.Equal(t, all[r], back[19-r], "row %d reordered", r)
	}
	require.NotEqual(t, all[0], all[1], "different rows get different scores")
}

// A configuration written before Config had Init reads as HeGlorot; one
// that has it keeps it, whatever the key's case (encoding/json matches
// keys without regard to case).
func TestConfigInitKey(t *testing.T) {
	for _, c := range []struct {
		json string
		want layers.Init
	}{
		{`{"Inputs":4}`, layers.HeGlorot},
		{`{"Inputs":4,"Init":"fan_in_uniform"}`, layers.FanInUniform},
		{`{"Inputs":4,"init":"glorot_uniform"}`, layers.GlorotUniform},
		{`{"Inputs":4,"INIT":"auto"}`, layers.InitAuto},
	} {
		var cfg vae.Config
		require.NoError(t, json.Unmarshal([]byte(c.json), &cfg), c.json)
		require.Equal(t, c.want, cfg.Init, c.json)
	}
	// a table model's file from before booleans were Bernoulli reads as
	// Gaussian booleans; one written now says Bernoulli
	var old vae.Config
	require.NoError(t, json.Unmarshal([]byte(`{"Inputs":4,"Table":true,"Likelihood":"gaussian_learned"}`), &old))
	require.Equal(t, vae.Gaussian, old.Booleans)
	m, err := vae.New(vae.Config{Inputs: 4, Table: true, Likelihood: vae.GaussianLearned})
	require.NoError(t, err)
	b, err := json.Marshal(m.Config())
	require.NoError(t, err)
	var now vae.Config
	require.NoError(t, json.Unmarshal(b, &now))
	require.Equal(t, vae.Bernoulli, now.Booleans)
}
