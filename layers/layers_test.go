package layers

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestSameSeedSameWeights(t *testing.T) {
	cfg := MLPConfig{Widths: []int{7, 5, 3}}
	a, err := NewMLP(cfg, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	b, err := NewMLP(cfg, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	c, err := NewMLP(cfg, rand.New(rand.NewPCG(1, 2)))
	require.NoError(t, err)
	for i, p := range a.Params() {
		require.Equal(t, p.F32(), b.Params()[i].F32())
		require.Equal(t, p.Name(), b.Params()[i].Name())
	}
	require.NotEqual(t, a.Params()[0].F32(), c.Params()[0].F32())
	require.Equal(t, "mlp.0.weight", a.Params()[0].Name())
	require.Equal(t, "mlp.1.bias", a.Params()[3].Name())
}

func moments(v []float64) (mean, variance float64) {
	for _, x := range v {
		mean += x
	}
	mean /= float64(len(v))
	for _, x := range v {
		variance += (x - mean) * (x - mean)
	}
	return mean, variance / float64(len(v)-1)
}

// Initialisers against their defining distributions: Glorot uniform on
// (-a, a) with a = sqrt(6/(fan_in+fan_out)) has variance a^2/3 = 2/(fan_in+
// fan_out) (Glorot & Bengio 2010, eq. 16); He normal has variance 2/fan_in
// (He et al. 2015, eq. 10). With n = 120,000 draws the standard error of a
// sample variance is about sqrt(2/n) = 0.4% (0.6% for the uniform's
// smaller kurtosis bound); the tolerance is 2%.
func TestInitialiserMoments(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	const in, out = 300, 400
	p := NewParam("w", in, out, Float64)
	FillGlorotUniform(p, in, out, rng)
	a := GlorotBound(in, out)
	for _, v := range p.F64() {
		require.LessOrEqual(t, math.Abs(v), a)
	}
	m, v := moments(p.F64())
	require.InDelta(t, 0, m, 0.01*a)
	require.InDelta(t, 2.0/(in+out), v, 0.02*2.0/(in+out))

	FillHeNormal(p, in, rng)
	m, v = moments(p.F64())
	require.InDelta(t, 0, m, 0.01*HeStd(in))
	require.InDelta(t, 2.0/in, v, 0.02*2.0/in)
}

func TestAutoInitPicksByActivation(t *testing.T) {
	m, err := NewMLP(MLPConfig{Widths: []int{200, 300, 300}, Hidden: Tanh, Output: Identity}, rand.New(rand.NewPCG(3, 3)))
	require.NoError(t, err)
	// tanh layer: Glorot, every weight within the bound.
	for _, v := range m.Layers[0].W.F32() {
		require.LessOrEqual(t, math.Abs(float64(v)), GlorotBound(200, 300)+1e-7)
	}
	m, err = NewMLP(MLPConfig{Widths: []int{200, 300}, Output: ReLU}, rand.New(rand.NewPCG(3, 3)))
	require.NoError(t, err)
	var s float64
	for _, v := range m.Layers[0].W.F32() {
		s += float64(v) * float64(v)
	}
	require.InDelta(t, 2.0/200, s/60000, 0.05*2.0/200)
}

// Inverted dropout: a fraction rate of zeros, the rest 1/(1-rate), mean 1.
func TestDropoutMask(t *testing.T) {
	mask := make([]float32, 100000)
	DropoutMask(mask, 0.3, rand.New(rand.NewPCG(9, 9)))
	zeros, sum := 0, 0.0
	for _, v := range mask {
		if v == 0 {
			zeros++
		} else {
			require.InDelta(t, 1/0.7, v, 1e-6)
		}
		sum += float64(v)
	}
	// binomial standard error sqrt(.3*.7/1e5) = 0.0015; tolerance 0.006.
	require.InDelta(t, 0.3, float64(zeros)/1e5, 0.006)
	require.InDelta(t, 1, sum/1e5, 0.01)
}

func TestActivationsReference(t *testing.T) {
	// Values from the definitions (from memory): softplus(0) = log 2,
	// sigmoid(0) = 1/2, elu(-1) = e^-1 - 1, tanh(1) = 0.7615941559557649.
	require.InDelta(t, math.Ln2, Softplus.Eval(0, 0), 1e-15)
	require.InDelta(t, 100, Softplus.Eval(100, 0), 1e-15)
	require.InDelta(t, 0, Softplus.Eval(-800, 0), 1e-300)
	require.Equal(t, 0.5, Sigmoid.Eval(0, 0))
	require.InDelta(t, math.Exp(-1)-1, ELU.Eval(-1, 0), 1e-15)
	require.InDelta(t, 0.7615941559557649, Tanh.Eval(1, 0), 1e-15)
	require.Equal(t, -0.4, LeakyReLU.Eval(-2, 0.2))
	require.Equal(t, 0.0, ReLU.Eval(-2, 0))
	for a := Identity; a < numActivations; a++ {
		b, err := ParseActivation(a.String())
		require.NoError(t, err)
		require.Equal(t, a, b)
		// derivative against a central difference
		for _, x := range []float64{-1.3, 0.4, 2.2} {
			num := (a.Eval(x+1e-6, 0.2) - a.Eval(x-1e-6, 0.2)) / 2e-6
			require.InDelta(t, num, a.Deriv(x, 0.2), 1e-8, a.String())
		}
	}
	_, err := ParseActivation("swish")
	require.Error(t, err)
}

func TestConfigErrors(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	for _, cfg := range []MLPConfig{
		{Widths: []int{3}},
		{Widths: []int{3, 0}},
		{Widths: []int{3, 2}, Dropout: 1},
		{Widths: []int{3, 2}, Hidden: Activation(99)},
		{Widths: []int{3, 2}, Precision: Precision(7)},
	} {
		_, err := NewMLP(cfg, rng)
		require.ErrorIs(t, err, ErrConfig, "%+v", cfg)
	}
	_, err := NewMLP(MLPConfig{Widths: []int{2, 2}}, nil)
	require.ErrorIs(t, err, ErrConfig)
}

func TestForwardChecksInput(t *testing.T) {
	m, err := NewMLP(MLPConfig{Widths: []int{3, 2}}, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	var ws Workspace
	_, err = m.Forward32(make([]float32, 5), 2, &ws)
	require.Error(t, err)
	_, err = m.Forward64(make([]float64, 6), 2, &ws)
	require.Error(t, err)
	out, err := m.Forward32(make([]float32, 0), 0, &ws)
	require.NoError(t, err)
	require.Empty(t, out)
}

func TestParamCopyAndValues(t *testing.T) {
	a := NewParam("a", 2, 2, Float32)
	require.NoError(t, a.SetValues([]float64{1, 2, 3, 4}))
	b := NewParam("b", 2, 2, Float64)
	require.NoError(t, b.CopyFrom(a))
	require.Equal(t, []float64{1, 2, 3, 4}, b.Values())
	require.Error(t, a.SetValues([]float64{1}))
	require.Error(t, NewParam("c", 1, 4, Float32).CopyFrom(a))
}
