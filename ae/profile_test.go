package ae

import (
	"errors"
	"math"
	"sync"
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/stretchr/testify/require"
)

// gaussOf fits a Gaussian to the rows of v (width p) with
// anomaly.FitGaussian: the reference for the profile's parts.
func gaussOf(t *testing.T, v []float32, p int) *anomaly.Gaussian {
	g, err := anomaly.FitGaussian(p, func(visit func([]float32)) error {
		for r := 0; r+p <= len(v); r += p {
			visit(v[r : r+p])
		}
		return nil
	})
	require.NoError(t, err)
	return g
}

func scaledRows(m *Model, d *data.Dataset) []float32 {
	x := append([]float32(nil), d.X...)
	m.Scaler.ApplyRows(x)
	return x
}

// The profile score is the formula of Profile's documentation, built here
// from Encode, Residuals and anomaly.FitGaussian (tolerance 1e-9
// relative: the same float64 sums); Score's values are RowScores', and a
// row's contributions plus its code part add up to its score.
func TestProfileScoreByHand(t *testing.T) {
	m, bc := trainedBC(t)
	require.NoError(t, m.FitProfile(bc.X, bc.Rows))
	d, k := m.cfg.Inputs, m.cfg.Latent
	codes, err := m.Encode(bc.X, bc.Rows)
	require.NoError(t, err)
	res, err := m.Residuals(bc.X, bc.Rows)
	require.NoError(t, err)
	in := scaledRows(m, bc)
	gc, gr, gi := gaussOf(t, codes, k), gaussOf(t, res, d), gaussOf(t, in, d)
	got, err := m.RowScores(bc.X, bc.Rows)
	require.NoError(t, err)
	contrib, err := m.Contributions(bc.X, bc.Rows)
	require.NoError(t, err)
	th := anomaly.Threshold{Value: 1}
	m.Threshold = &th
	scored, err := m.Score(bc.X, bc.Rows, 3)
	require.NoError(t, err)
	w := m.Profile.Weight
	require.Equal(t, DefaultProfileWeight, w)
	for r := range bc.Rows {
		dc, _, _ := gc.Distance(nil, nil, codes[r*k:(r+1)*k])
		dr, _, _ := gr.Distance(nil, nil, res[r*d:(r+1)*d])
		di, _, _ := gi.Distance(nil, nil, in[r*d:(r+1)*d])
		want := w*(dc+dr)/float64(d+k) + (1-w)*di/float64(d)
		require.InEpsilon(t, want, got[r], 1e-9, "row %d", r)
		require.Equal(t, got[r], scored[r].Value, "row %d", r)
		var sum float64
		for _, c := range contrib[r*d : (r+1)*d] {
			sum += c
		}
		require.InDelta(t, w*dc/float64(d+k), got[r]-sum, 1e-9*got[r], "row %d: the code's part", r)
	}
	// the training rows score a little under 1 on average: a distance's
	// mean is its width under the sample covariance, less under the
	// shrunk one (0.754 here)
	var mean float64
	for _, s := range got {
		mean += s
	}
	mean /= float64(len(got))
	require.Greater(t, mean, 0.5)
	require.LessOrEqual(t, mean, 1.0)
}

// A residual Gaussian given to FitProfileWith is kept as it is; InputOnly
// scores by the input distance alone.
func TestFitProfileWith(t *testing.T) {
	m, bc := trainedBC(t)
	d := m.cfg.Inputs
	half := bc.Subset(seq(0, bc.Rows/2))
	other := bc.Subset(seq(bc.Rows/2, bc.Rows))
	res, err := m.Residuals(other.X, other.Rows)
	require.NoError(t, err)
	g := gaussOf(t, res, d)
	require.NoError(t, m.FitProfileWith(half.X, half.Rows, ProfileSettings{Residual: g}))
	require.Same(t, g, m.Profile.Residual)
	require.NoError(t, m.FitProfileWith(half.X, half.Rows, ProfileSettings{Residual: g, InputOnly: true}))
	got, err := m.RowScores(bc.X[:5*d], 5)
	require.NoError(t, err)
	gi := gaussOf(t, scaledRows(m, half), d)
	in := scaledRows(m, bc)
	for r := range 5 {
		di, _, _ := gi.Distance(nil, nil, in[r*d:(r+1)*d])
		require.InEpsilon(t, di/float64(d), got[r], 1e-9)
	}
	require.Error(t, m.FitProfileWith(half.X, half.Rows, ProfileSettings{Residual: gaussOf(t, res[:10*(d-1)], d-1)}))
}

func seq(lo, hi int) []int {
	s := make([]int, 0, hi-lo)
	for i := lo; i < hi; i++ {
		s = append(s, i)
	}
	return s
}

// A profile survives the model file bit for bit; a profile of the wrong
// width or with a bad weight is refused when the file is read.
func TestProfileInFile(t *testing.T) {
	m, bc := trainedBC(t)
	require.Equal(t, "reconstruction error", m.ScoreName())
	require.NoError(t, m.FitProfile(bc.X, bc.Rows))
	require.Equal(t, "distance score", m.ScoreName())
	want, err := m.RowScores(bc.X, bc.Rows)
	require.NoError(t, err)
	f, err := m.File(nil)
	require.NoError(t, err)
	require.EqualValues(t, 2, f.Version, "a file with a profile must be refused by builds that ignore profiles")
	back, err := FromFile(f)
	require.NoError(t, err)
	got, err := back.RowScores(bc.X, bc.Rows)
	require.NoError(t, err)
	require.Equal(t, want, got)

	for name, spoil := range map[string]func(p *Profile){
		"width":  func(p *Profile) { p.Code.Mean = p.Code.Mean[:1]; p.Code.Precision = p.Code.Precision[:1] },
		"weight": func(p *Profile) { p.Weight = 2 },
		"part":   func(p *Profile) { p.Input = nil },
		"nan":    func(p *Profile) { p.Residual.Mean[0] = math.NaN() },
	} {
		m2, _ := trainedBC(t)
		require.NoError(t, m2.FitProfile(bc.X, bc.Rows))
		spoil(m2.Profile)
		f, err := m2.File(nil)
		if err != nil { // NaN does not marshal: refused on the way out
			require.Equal(t, "nan", name)
			continue
		}
		_, err = FromFile(f)
		require.Error(t, err, name)
	}
}

// BCE models keep the reconstruction error.
func TestProfileNeedsMSE(t *testing.T) {
	m, err := New(Config{Inputs: 4, Latent: 2, Loss: BCE, Seed: 1})
	require.NoError(t, err)
	err = m.FitProfile(make([]float32, 8), 2)
	require.True(t, errors.Is(err, anomaly.ErrNoProfile), "%v", err)
}

// Many goroutines score with a profile at once; results equal the
// sequential ones bit for bit. Run under -race.
func TestProfileConcurrent(t *testing.T) {
	m, bc := trainedBC(t)
	require.NoError(t, m.FitProfile(bc.X, bc.Rows))
	want, err := m.RowScores(bc.X, bc.Rows)
	require.NoError(t, err)
	var wg sync.WaitGroup
	bad := make(chan int, 16)
	for g := range 8 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for it := range 30 {
				r := (g*41 + it*7) % bc.Rows
				got, err := m.RowScores(bc.Row(r), 1)
				if err != nil || got[0] != want[r] {
					bad <- r
					return
				}
			}
		}()
	}
	wg.Wait()
	close(bad)
	for r := range bad {
		t.Errorf("row %d scored differently alone and concurrently", r)
	}
}

// A table's missing-cell indicators are left out of the profile: the
// residual and input parts cover the other inputs only (the formula of
// Profile's documentation with n the inputs scored), the indicators
// contribute nothing, and the profile survives a round trip through a
// file.
func TestProfileLeavesIndicatorsOut(t *testing.T) {
	m, bc := trainedBC(t)
	// read the 30 inputs as 15 numbers, each followed by an indicator
	enc := &data.Encoding{}
	for i := range 15 {
		enc.Fields = append(enc.Fields, data.Field{Name: bc.Columns[2*i], Type: data.Numeric, Indicator: true})
	}
	m.Encoding, m.Columns = enc, enc.Columns()
	require.NoError(t, m.FitProfile(bc.X, bc.Rows))
	var even []int
	for j := 0; j < 30; j += 2 {
		even = append(even, j)
	}
	require.Equal(t, even, m.Profile.Scored)
	d, k, ds := m.cfg.Inputs, m.cfg.Latent, 15
	codes, err := m.Encode(bc.X, bc.Rows)
	require.NoError(t, err)
	res, err := m.Residuals(bc.X, bc.Rows)
	require.NoError(t, err)
	require.Len(t, res, bc.Rows*ds)
	// a value whose indicator is set (raw at least 0.5) has no residual:
	// the loss left it out
	masked := 0
	for r := range bc.Rows {
		for i := range ds {
			if bc.X[r*d+2*i+1] >= 0.5 {
				require.Zero(t, res[r*ds+i], "row %d value %d", r, i)
				masked++
			} else {
				require.NotZero(t, res[r*ds+i], "row %d value %d", r, i)
			}
		}
	}
	require.NotZero(t, masked)
	in := scaledRows(m, bc)
	var inS []float32
	for r := range bc.Rows {
		for _, j := range even {
			inS = append(inS, in[r*d+j])
		}
	}
	gc, gr, gi := gaussOf(t, codes, k), gaussOf(t, res, ds), gaussOf(t, inS, ds)
	got, err := m.RowScores(bc.X, bc.Rows)
	require.NoError(t, err)
	contrib, err := m.Contributions(bc.X, bc.Rows)
	require.NoError(t, err)
	w := m.Profile.Weight
	for r := range bc.Rows {
		dc, _, _ := gc.Distance(nil, nil, codes[r*k:(r+1)*k])
		dr, _, _ := gr.Distance(nil, nil, res[r*ds:(r+1)*ds])
		di, _, _ := gi.Distance(nil, nil, inS[r*ds:(r+1)*ds])
		want := w*(dc+dr)/float64(ds+k) + (1-w)*di/float64(ds)
		require.InEpsilon(t, want, got[r], 1e-9, "row %d", r)
		for j := 1; j < d; j += 2 {
			require.Zero(t, contrib[r*d+j], "row %d: indicator %d contributes", r, j)
		}
	}
	f, err := m.File(nil)
	require.NoError(t, err)
	back, err := FromFile(f)
	require.NoError(t, err)
	again, err := back.RowScores(bc.X, bc.Rows)
	require.NoError(t, err)
	require.Equal(t, got, again)
	back.Profile.Scored = []int{3, 1}
	require.Error(t, back.Profile.check(back.cfg), "scored inputs out of order")
}
