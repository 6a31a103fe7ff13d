//go:build ignore

// make_golden.go wrote the model files, checkpoints and expected outputs in
// this folder with the library as it stood at commit 0295ee8, before the
// trained models were split from their training (the architecture change).
// The compatibility tests load these files with today's code and require
// bitwise the same weights, scores, codes and samples.
//
// It uses the API of that commit, so it builds only there:
//
//	git worktree add /tmp/quern-0295ee8 0295ee8
//	cp testdata/compat/make_golden.go /tmp/quern-0295ee8/
//	(cd /tmp/quern-0295ee8 && go run make_golden.go) # writes /tmp/quern-0295ee8/testdata/compat
//
// Every case trains 4 epochs straight (CASE.qm, calibrated where the kind
// has a threshold) and, separately, stops after epoch 2 with a checkpoint
// (CASE.ckpt) that resumes to the same 4-epoch model. CASE.json holds the
// straight run's history and outputs, every float written in full (Go's
// shortest round-trip form).
package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
)

const out = "testdata/compat"

type model interface {
	Train(ctx context.Context, tr, va *data.Dataset, cfg train.Config) (*train.History, error)
	File(prov *modelfile.Provenance, h *train.History) (*modelfile.File, error)
}

func must(err error) {
	if err != nil {
		panic(err)
	}
}

func load(name string) *data.Dataset {
	switch name {
	case "breast_cancer":
		d, err := data.LoadCSV("testdata/sklearn/breast_cancer.csv", data.CSVConfig{NoHeader: true, SkipLines: 1, Label: "c30"})
		must(err)
		return d
	case "digits":
		d, err := data.LoadCSV("testdata/sklearn/digits.csv.gz", data.CSVConfig{NoHeader: true, Label: "c64"})
		must(err)
		return d
	case "fashion500":
		d, err := data.LoadIDX("testdata/fashion-mnist/t10k-images-idx3-ubyte-first500.gz", data.IDXConfig{Labels: "testdata/fashion-mnist/t10k-labels-idx1-ubyte-first500.gz"})
		must(err)
		return d
	}
	panic(name)
}

// split holds out 20% of the rows with the stream the command line uses.
func split(d *data.Dataset, seed uint64) (*data.Dataset, *data.Dataset) {
	tr, va, err := d.Split(0.2, rand.New(rand.NewPCG(seed, 7)))
	must(err)
	return tr, va
}

type tc struct {
	name, data string
	seed       uint64
	batch      int
	patience   int
	build      func() model
}

var cases = []tc{
	{"ae-plain", "breast_cancer", 3, 32, 0, func() model {
		m, err := ae.New(ae.Config{Inputs: 30, Hidden: []int{16}, Latent: 4, Seed: 3})
		must(err)
		return m
	}},
	{"ae-kinds", "breast_cancer", 4, 32, 3, func() model {
		m, err := ae.New(ae.Config{Inputs: 30, Hidden: []int{12, 8}, Latent: 3, Activation: layers.Tanh, Dropout: 0.1,
			Noise: ae.Corruption{Kind: ae.MaskingNoise, Level: 0.2}, Sparsity: ae.Sparsity{Kind: ae.L1Sparsity, Weight: 1e-3},
			Classes: 2, WeightDecay: 1e-3, ClipNorm: 1, Rate: 3e-3, Seed: 4})
		must(err)
		return m
	}},
	{"ae-f64", "digits", 5, 64, 0, func() model {
		m, err := ae.New(ae.Config{Inputs: 64, Hidden: []int{16}, Latent: 4, Activation: layers.LeakyReLU,
			Noise: ae.Corruption{Kind: ae.SaltPepperNoise, Level: 0.1}, Scaling: data.ScaleMinMax, Precision: layers.Float64, Seed: 5})
		must(err)
		return m
	}},
	{"vae-bernoulli", "fashion500", 6, 50, 0, func() model {
		m, err := vae.New(vae.Config{Inputs: 784, Hidden: []int{16}, Latent: 3, FreeBits: 0.1,
			Schedule: vae.BetaSchedule{Kind: vae.Linear, Steps: 10}, Seed: 6})
		must(err)
		return m
	}},
	{"vae-gaussian", "breast_cancer", 7, 32, 2, func() model {
		m, err := vae.New(vae.Config{Inputs: 30, Hidden: []int{16}, Latent: 3, Likelihood: vae.GaussianLearned,
			ClipNorm: 5, WeightDecay: 1e-4, Rate: 3e-3, Seed: 7})
		must(err)
		return m
	}},
	{"vae-f64", "breast_cancer", 8, 32, 0, func() model {
		m, err := vae.New(vae.Config{Inputs: 30, Hidden: []int{8}, Latent: 2, Likelihood: vae.GaussianShared,
			Beta: 0.5, Schedule: vae.BetaSchedule{Kind: vae.Cyclical, Steps: 12}, Precision: layers.Float64, Seed: 8})
		must(err)
		return m
	}},
	{"gan-bce", "breast_cancer", 9, 32, 0, func() model {
		m, err := gan.New(gan.Config{Outputs: 30, Noise: 8, GenHidden: []int{16}, DiscHidden: []int{16}, Pack: 2, DiscSteps: 2,
			LabelSmoothing: 0.1, Seed: 9})
		must(err)
		return m
	}},
	{"gan-wasserstein", "digits", 10, 64, 0, func() model {
		m, err := gan.New(gan.Config{Outputs: 64, Noise: 8, GenHidden: []int{32}, DiscHidden: []int{32}, Critic: gan.Wasserstein,
			Classes: 10, Scaling: data.ScaleMinMax, Seed: 10})
		must(err)
		return m
	}},
	{"gan-f64", "breast_cancer", 11, 32, 0, func() model {
		m, err := gan.New(gan.Config{Outputs: 30, Noise: 4, GenHidden: []int{8}, DiscHidden: []int{8}, Loss: gan.Minimax,
			Precision: layers.Float64, Seed: 11})
		must(err)
		return m
	}},
}

type golden struct {
	Case     string              `json:"case"`
	Data     string              `json:"data"`
	Seed     uint64              `json:"seed"`
	Batch    int                 `json:"batch"`
	Patience int                 `json:"patience"`
	Epochs   []train.EpochRecord `json:"epochs"`
	Best     int                 `json:"best_epoch"`
	Outputs  map[string]any      `json:"outputs"`
}

func f64s(v []float32) []float64 {
	o := make([]float64, len(v))
	for i, x := range v {
		o[i] = float64(x)
	}
	return o
}

func outputs(m model, d *data.Dataset) map[string]any {
	o := map[string]any{}
	first := func(n int) ([]float32, int) { return d.X[:n*d.Cols], n }
	switch m := m.(type) {
	case *ae.Model:
		e, err := m.RowErrors(d.X, d.Rows)
		must(err)
		o["row_errors"] = e
		x, n := first(10)
		c, err := m.Encode(x, n)
		must(err)
		o["codes"] = f64s(c)
		x, n = first(3)
		r, err := m.Reconstruct(x, n)
		must(err)
		o["reconstructions"] = f64s(r)
		x, n = first(20)
		s, err := m.Score(x, n, 3)
		must(err)
		o["scores"] = s
		if m.Head != nil {
			l, p, err := m.Classify(x, n)
			must(err)
			o["classes"], o["class_probabilities"] = l, p
		}
	case *vae.Model:
		x, n := first(20)
		s, err := m.NegELBO(x, n)
		must(err)
		o["neg_elbo"] = s
		iw, err := m.IWAE(x[:5*d.Cols], 5, 5, 3)
		must(err)
		o["iwae5"] = iw
		c, err := m.Encode(x[:10*d.Cols], 10)
		must(err)
		o["codes"] = f64s(c)
		smp, err := m.Sample(5, 9)
		must(err)
		o["samples"] = f64s(smp)
		r, err := m.Reconstruct(x[:3*d.Cols], 3)
		must(err)
		o["reconstructions"] = f64s(r)
		sc, err := m.Score(x, n, 3)
		must(err)
		o["scores"] = sc
	case *gan.Model:
		class := -1
		g, err := m.Generate(10, 9, class)
		must(err)
		o["samples"] = f64s(g)
		x, n := first(10)
		var labels []int
		if m.Config().Classes > 0 {
			labels = d.Labels[:n]
		}
		p, err := m.Discriminate(x, n, labels)
		must(err)
		o["discriminator"] = p
	}
	return o
}

type calibrator interface {
	Calibrate(x []float32, rows int, c anomaly.Config) (anomaly.Threshold, error)
}

func run(c tc) {
	full := load(c.data)
	if c.name == "vae-bernoulli" {
		full.Labels = nil
	}
	tr, va := split(full, c.seed)
	if c.name != "ae-kinds" && c.name != "gan-wasserstein" {
		tr.Labels, va.Labels = nil, nil // only these two use the labels
	}
	cfg := train.Config{Epochs: 4, BatchSize: c.batch, Patience: c.patience}
	// straight
	m := c.build()
	h, err := m.Train(context.Background(), tr, va, cfg)
	must(err)
	if cal, ok := m.(calibrator); ok {
		_, err := cal.Calibrate(va.X, va.Rows, anomaly.Config{FalseAlarm: 0.05})
		must(err)
	}
	f, err := m.File(&modelfile.Provenance{DataFile: c.data, DataFingerprint: full.Fingerprint(), DataRows: full.Rows}, nil)
	must(err)
	must(modelfile.Write(filepath.Join(out, c.name+".qm"), f))
	g := golden{Case: c.name, Data: c.data, Seed: c.seed, Batch: c.batch, Patience: c.patience, Epochs: h.Epochs, Best: h.BestEpoch, Outputs: outputs(m, full)}
	b, err := json.MarshalIndent(g, "", " ")
	must(err)
	must(os.WriteFile(filepath.Join(out, c.name+".json"), append(b, '\n'), 0o644))
	// checkpoint after epoch 2
	m2 := c.build()
	stop := errors.New("stop")
	cfg.OnEpoch = func(p train.Progress, h *train.History) error {
		if p.Epoch < 2 {
			return nil
		}
		f, err := m2.File(nil, h)
		must(err)
		must(modelfile.Write(filepath.Join(out, c.name+".ckpt"), f))
		return stop
	}
	_, err = m2.Train(context.Background(), tr, va, cfg)
	if !errors.Is(err, stop) {
		panic(fmt.Sprint(c.name, err))
	}
}

func main() {
	must(os.MkdirAll(out, 0o755))
	for _, c := range cases {
		run(c)
		fmt.Println("wrote", c.name)
	}
}
