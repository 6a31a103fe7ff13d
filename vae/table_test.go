package vae_test

import (
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/fidelity"
	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

// payTable is an invented table: an amount that depends on a
// three-level category, a second number, and empty amounts in every
// tenth row.
func payTable(t *testing.T, n, offset int) *data.Dataset {
	var b strings.Builder
	b.WriteString("amount,kind,other\n")
	for i := offset; i < offset+n; i++ {
		k := i % 3
		amount := fmt.Sprintf("%.3f", 10*float64(k+1)+math.Sin(float64(i)))
		if i%10 == 0 {
			amount = ""
		}
		fmt.Fprintf(&b, "%s,%s,%.3f\n", amount, []string{"a", "b", "c"}[k], math.Cos(float64(7*i)))
	}
	d, err := data.ReadCSV(strings.NewReader(b.String()), "pay.csv", data.CSVConfig{Typed: true})
	require.NoError(t, err)
	return d
}

// A table's likelihood, worked by its definition for one row: each
// observed Gaussian input's log-density (indicators left out) with the
// scaler's log-factor, the log-probability of the row's level under the
// softmax of the category's outputs, a missing cell's terms left out and
// its cost charged, an unseen level charged the least probable level.
func TestTableLikelihoodByDefinition(t *testing.T) {
	d := payTable(t, 30, 0)
	require.Equal(t, []string{"amount", "amount (missing)", "kind=a", "kind=b", "kind=c", "other"}, d.Encoding.Columns())
	m, err := vae.New(vae.Config{Inputs: 6, Latent: 2, Likelihood: vae.GaussianLearned, Categories: d.Encoding.CategorySpans(), Seed: 1})
	require.NoError(t, err)
	m.Encoding = d.Encoding
	m.Scaler = &data.Scaler{Kind: data.ScaleStandard, Offset: []float64{20, 0.1, 0.3, 0.3, 0.3, 0}, Factor: []float64{0.1, 3, 2, 2, 2, 1.5}}
	lv := []float64{-1, 0.5, 0, 0, 0, 0.2}
	copy(m.LogVar.F32(), []float32{-1, 0.5, 0, 0, 0, 0.2})
	m.MissingCost = []float64{2.5, 0, 0}
	o := []float64{0.3, -0.2, 1, -1, 0.5, 0.1}
	scaled := func(raw []float64) []float64 {
		out := make([]float64, len(raw))
		for j, v := range raw {
			out[j] = (v - m.Scaler.Offset[j]) * m.Scaler.Factor[j]
		}
		return out
	}
	gauss := func(xs []float64, j int) float64 {
		return math.Log(m.Scaler.Factor[j]) - losses.GaussianNLLElem(xs[j], o[j], lv[j])
	}
	logSoftmax := func(k int) float64 {
		z := math.Exp(o[2]) + math.Exp(o[3]) + math.Exp(o[4])
		return o[k] - math.Log(z)
	}
	// observed amount 23, level b
	xs := scaled([]float64{23, 0, 0, 1, 0, 0.4})
	want := gauss(xs, 0) + logSoftmax(3) + gauss(xs, 5)
	require.InDelta(t, want, m.RowLogLik(xs, o), 1e-6)
	// missing amount (filled, indicator 1): its term out, its cost in
	xs = scaled([]float64{20, 1, 0, 1, 0, 0.4})
	want = logSoftmax(3) + gauss(xs, 5) - 2.5
	require.InDelta(t, want, m.RowLogLik(xs, o), 1e-6)
	// a level not seen in training: the least probable level (kind=b)
	xs = scaled([]float64{23, 0, 0, 0, 0, 0.4})
	want = gauss(xs, 0) + logSoftmax(3) + gauss(xs, 5)
	require.InDelta(t, want, m.RowLogLik(xs, o), 1e-6)
}

// Density scores of rows with a missing cell are comparable with those of
// complete rows: with each complete held-out row's amount blanked, the
// mean score moves by less than a tenth of the amount's missing-cell
// cost, where leaving the cell's terms out uncharged would lower it by
// about the whole cost (the test checks that too). Categories reconstruct
// as their levels' probabilities.
func TestMissingCellsComparable(t *testing.T) {
	tr, calib, test := payTable(t, 900, 0), payTable(t, 300, 1000), payTable(t, 300, 2000)
	m, err := vae.New(vae.Config{Inputs: tr.Cols, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Categories: tr.Encoding.CategorySpans(), Seed: 2})
	require.NoError(t, err)
	trainenv.Fit(t, m, tr, nil, train.Settings{Epochs: 40, BatchSize: 64, Optimizer: train.Optimizer{Rate: 3e-3}})
	calibSet, err := data.ReadCSV(strings.NewReader(toCSV(calib)), "c.csv", data.CSVConfig{Encoding: m.Encoding})
	require.NoError(t, err)
	_, err = m.Calibrate(calibSet.X, calibSet.Rows, anomaly.Config{FalseAlarm: 0.05})
	require.NoError(t, err)
	require.Len(t, m.MissingCost, 3)
	cost := m.MissingCost[0]
	require.Greater(t, cost, 0.5, "an amount costs something")

	var full, blank []float32
	d := test.Cols
	for r := range test.Rows {
		row := test.X[r*d : (r+1)*d]
		if row[1] == 1 {
			continue
		}
		full = append(full, row...)
		b := append([]float32(nil), row...)
		b[0], b[1] = m.Encoding.Fields[0].Fill, 1
		blank = append(blank, b...)
	}
	rows := len(full) / d
	sf, err := m.NegELBO(full, rows)
	require.NoError(t, err)
	sb, err := m.NegELBO(blank, rows)
	require.NoError(t, err)
	mean := func(v []float64) float64 {
		var s float64
		for _, x := range v {
			s += x
		}
		return s / float64(len(v))
	}
	shift := mean(sb) - mean(sf)
	t.Logf("shift %.3f, cost %.3f", shift, cost)
	require.Less(t, math.Abs(shift), cost/10, "blanked rows score like complete ones (shift %.3f, cost %.3f)", shift, cost)
	m.MissingCost[0] = 0
	sb, err = m.NegELBO(blank, rows)
	require.NoError(t, err)
	t.Logf("uncharged shift %.3f", mean(sb)-mean(sf))
	require.Less(t, mean(sb)-mean(sf), -cost/2, "uncharged, a missing cell would lower the score")

	// a calibration without a row that has the amount fails and leaves
	// the model as it was
	m.MissingCost[0] = cost
	th := *m.Threshold
	_, err = m.Calibrate(blank, rows, anomaly.Config{FalseAlarm: 0.05})
	require.ErrorContains(t, err, `column "amount" is missing in every calibration row`)
	require.Equal(t, cost, m.MissingCost[0])
	require.Equal(t, th, *m.Threshold)

	rec, err := m.Reconstruct(full[:d], 1)
	require.NoError(t, err)
	require.InDelta(t, 1, float64(rec[2]+rec[3]+rec[4]), 1e-5, "a category's reconstruction is its levels' probabilities")
}

// toCSV writes a typed dataset's rows back as the table's cells.
func toCSV(d *data.Dataset) string {
	var b strings.Builder
	b.WriteString(strings.Join(d.Encoding.Names(), ",") + "\n")
	for r := range d.Rows {
		cells := d.Encoding.Decode(nil, d.X[r*d.Cols:(r+1)*d.Cols])
		b.WriteString(strings.Join(cells, ",") + "\n")
	}
	return b.String()
}

// A table VAE's samples are rows of the table: each category one level,
// a boolean 0 or 1, no missing cell, the same for the same seed, and the
// category's shares near the training rows' (total variation below 0.1
// for 2000 samples of a model trained 40 epochs; common practice, no
// source).
func TestTableSamples(t *testing.T) {
	var b strings.Builder
	b.WriteString("amount,kind,flag\n")
	for i := range 900 {
		k := []string{"a", "a", "b", "c"}[i%4]
		amount := fmt.Sprintf("%.3f", 10*float64(i%4+1)+math.Sin(float64(i)))
		if i%10 == 0 {
			amount = ""
		}
		fmt.Fprintf(&b, "%s,%s,%s\n", amount, k, map[bool]string{true: "yes", false: "no"}[k == "a"])
	}
	d, err := data.ReadCSV(strings.NewReader(b.String()), "t.csv", data.CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Equal(t, []string{"amount", "amount (missing)", "kind=a", "kind=b", "kind=c", "flag"}, d.Encoding.Columns())
	m, err := vae.New(vae.Config{Inputs: d.Cols, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Categories: d.Encoding.CategorySpans(), Seed: 3})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 40, BatchSize: 64, Optimizer: train.Optimizer{Rate: 3e-3}})
	n := 2000
	s, err := m.Sample(n, 7)
	require.NoError(t, err)
	again, err := m.SampleInto(nil, n, 7)
	require.NoError(t, err)
	require.Equal(t, s, again, "same seed, same samples, either way")
	share := [3]float64{}
	for r := range n {
		row := s[r*6 : (r+1)*6]
		require.InDelta(t, 0, row[1], 1e-5, "row %d: no missing cell", r)
		var ones int
		for k := 2; k < 5; k++ {
			require.True(t, math.Abs(float64(row[k])) < 1e-5 || math.Abs(float64(row[k]-1)) < 1e-5, "row %d: a level is 0 or 1, got %v", r, row[k])
			if row[k] > 0.5 {
				ones++
				share[k-2] += 1 / float64(n)
			}
		}
		require.Equal(t, 1, ones, "row %d: one level", r)
		require.True(t, math.Abs(float64(row[5])) < 1e-5 || math.Abs(float64(row[5]-1)) < 1e-5, "row %d: a boolean is 0 or 1", r)
	}
	tv := (math.Abs(share[0]-0.5) + math.Abs(share[1]-0.25) + math.Abs(share[2]-0.25)) / 2
	require.Less(t, tv, 0.1, "shares %v", share)

	// decoding a table model allocates nothing once warm (its table
	// likelihood is built once)
	codes, err := m.EncodeInto(nil, d.X[:60], 10)
	require.NoError(t, err)
	dec := make([]float32, 60)
	run := func() { _, _ = m.DecodeInto(dec, codes, 10) }
	run()
	if !testenv.RaceBuild {
		require.Zero(t, testing.AllocsPerRun(20, run))
	}
}

// With its marginal maps fitted, a table VAE's samples have each column
// distributed as in the training rows: the amount's Kolmogorov-Smirnov
// statistic against the training amounts and the category's total
// variation distance from the training shares below 0.05 for 4000
// samples (the statistics of two such samples of 4000 and 900 from one
// distribution rarely pass 0.05; common practice, no source), missing
// amounts as often as in training (10%, within 0.02), and the maps
// survive a model file (the same samples after).
func TestMarginals(t *testing.T) {
	var b strings.Builder
	b.WriteString("amount,kind,flag\n")
	for i := range 900 {
		k := []string{"a", "a", "b", "c"}[i%4]
		amount := fmt.Sprintf("%.3f", math.Exp(float64(i%4)+math.Sin(float64(i))))
		if i%10 == 0 {
			amount = ""
		}
		fmt.Fprintf(&b, "%s,%s,%s\n", amount, k, map[bool]string{true: "yes", false: "no"}[k == "a"])
	}
	d, err := data.ReadCSV(strings.NewReader(b.String()), "t.csv", data.CSVConfig{Typed: true})
	require.NoError(t, err)
	m, err := vae.New(vae.Config{Inputs: d.Cols, Hidden: []int{16}, Latent: 2, Likelihood: vae.GaussianLearned, Categories: d.Encoding.CategorySpans(), Seed: 3})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 20, BatchSize: 64, Optimizer: train.Optimizer{Rate: 3e-3}})
	require.NoError(t, m.FitMarginals(d.X, d.Rows))
	n := 4000
	s, err := m.Sample(n, 11)
	require.NoError(t, err)
	var real, synth []float64
	var shareReal, shareSynth [3]float64
	for r := range d.Rows {
		row := d.Row(r)
		if row[1] < 0.5 {
			real = append(real, float64(row[0]))
		}
		for k := range 3 {
			shareReal[k] += float64(row[2+k]) / float64(d.Rows)
		}
	}
	missing := 0
	for r := range n {
		row := s[r*6 : (r+1)*6]
		if row[1] >= 0.5 {
			missing++
		} else {
			synth = append(synth, float64(row[0]))
		}
		for k := range 3 {
			shareSynth[k] += float64(row[2+k]) / float64(n)
		}
	}
	require.Less(t, fidelityKS(real, synth), 0.05)
	var tv float64
	for k := range 3 {
		tv += math.Abs(shareReal[k]-shareSynth[k]) / 2
	}
	require.Less(t, tv, 0.05, "%v against %v", shareSynth, shareReal)
	require.InDelta(t, 0.1, float64(missing)/float64(n), 0.02)
	// the shifts are what matches the shares: without them, the level
	// and boolean shares drift (the tolerance is the binomial noise of
	// 4000 draws, about 4 standard deviations)
	flags := 0.0
	for r := range n {
		flags += float64(s[r*6+5]) / float64(n)
	}
	require.InDelta(t, 0.5, flags, 0.035, "the boolean's share")
	shifts := m.Marginals.Shift
	m.Marginals.Shift = make([]float64, len(shifts))
	unshifted, err := m.Sample(n, 11)
	require.NoError(t, err)
	m.Marginals.Shift = shifts
	var drift float64
	for k := range 3 {
		var share float64
		for r := range n {
			share += float64(unshifted[r*6+2+k]) / float64(n)
		}
		drift += math.Abs(share-shareReal[k]) / 2
	}
	require.Greater(t, drift, tv, "the shifts bring the shares closer (%v unshifted against %v)", drift, tv)

	path := filepath.Join(t.TempDir(), "m.qm")
	require.NoError(t, m.Save(path, nil))
	back, err := vae.Load(path)
	require.NoError(t, err)
	again, err := back.Sample(n, 11)
	require.NoError(t, err)
	require.Equal(t, s, again)
}

// fidelityKS is the two-sample Kolmogorov-Smirnov statistic.
func fidelityKS(a, b []float64) float64 { return fidelity.KS(a, b) }

// A boolean in a table's likelihood is Bernoulli, the decoder's output its
// log-odds: log p = -BCEWithLogits(o, bit), by definition.
func TestTableBooleanIsBernoulli(t *testing.T) {
	d, err := data.ReadCSV(strings.NewReader("x,b\n1.5,yes\n2.5,no\n3,yes\n"), "b.csv", data.CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Equal(t, data.Boolean, d.Encoding.Fields[1].Type)
	m, err := vae.New(vae.Config{Inputs: 2, Latent: 1, Likelihood: vae.GaussianLearned, Table: true, Seed: 1})
	require.NoError(t, err)
	m.Encoding = d.Encoding
	m.Scaler = &data.Scaler{Kind: data.ScaleStandard, Offset: []float64{2, 0.6}, Factor: []float64{2, 1.5}}
	copy(m.LogVar.F32(), []float32{-0.5, 0.3})
	o := []float64{0.2, 1.3}
	for _, raw := range [][2]float64{{2.5, 1}, {1.5, 0}} {
		xs := []float64{(raw[0] - 2) * 2, (raw[1] - 0.6) * 1.5}
		want := math.Log(2) - losses.GaussianNLLElem(xs[0], o[0], -0.5) - losses.BCEWithLogitsElem(o[1], raw[1])
		require.InDelta(t, want, m.RowLogLik(xs, o), 1e-6)
	}
	rec, err := m.Decode([]float32{0.3}, 1)
	require.NoError(t, err)
	out, err := layers.Run(m.Decoder, []float32{0.3}, 1, &layers.Workspace{}, nil)
	require.NoError(t, err)
	require.InDelta(t, 1/(1+math.Exp(-float64(out[1]))), float64(rec[1]), 1e-6, "a boolean decodes to its probability")
}
