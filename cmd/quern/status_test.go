package main

import (
	"bytes"
	"compress/gzip"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

func TestStatusLines(t *testing.T) {
	var b bytes.Buffer
	st := newStatus(&b, false)
	st.every = time.Nanosecond // every step prints a plain line (not a terminal)
	st.begin("load", nil)
	st.end()
	st.begin("train", nil)
	st.step(train.Progress{Epoch: 2, Epochs: 5, Step: 3, Steps: 10, SamplesPerSec: 1.5e6, Remaining: 90 * time.Second,
		Metrics: []train.Metric{{Name: "loss", Value: 0.25}, {Name: "reconstruction", Value: 0.25}, {Name: "kl", Value: 3}}})
	st.epoch(train.Progress{Epoch: 2, Epochs: 5, SamplesPerSec: 900, Metrics: []train.Metric{{Name: "loss", Value: 0.25}},
		Validation: []train.Metric{{Name: "loss", Value: 0.3}}}, &train.History{BestEpoch: 2})
	st.done()
	lines := strings.Split(strings.TrimSpace(b.String()), "\n")
	require.Len(t, lines, 3, b.String())
	require.Equal(t, "train  epoch 2/5  step 3/10  loss=0.25  kl=3  1.5M rows/s  1m30s to go", lines[0], "a term equal to the loss is left out")
	require.Equal(t, "epoch 2/5  loss=0.25  validation loss=0.3 (best)  900 rows/s", lines[1])
	require.Regexp(t, `^time: load \S+, train \S+; \S+ in all$`, lines[2])
	require.NotContains(t, b.String(), "\r", "no in-place drawing off a terminal")

	b.Reset()
	q := newStatus(&b, true)
	q.begin("train", nil)
	q.step(train.Progress{Epoch: 1, Epochs: 1, Step: 1, Steps: 1})
	q.say("a warning")
	q.done()
	require.Empty(t, b.String(), "-quiet prints nothing")
}

func TestShortDuration(t *testing.T) {
	for _, c := range []struct {
		d    time.Duration
		want string
	}{{0, "<1ms"}, {3 * time.Millisecond, "3ms"}, {420 * time.Millisecond, "0.42s"}, {4200 * time.Millisecond, "4.2s"},
		{37 * time.Second, "37s"}, {125 * time.Second, "2m05s"}, {80 * time.Minute, "1h20m"}} {
		require.Equal(t, c.want, shortDuration(c.d))
	}
}

func TestReadableSettings(t *testing.T) {
	for in, want := range map[string]string{"Inputs": "inputs", "CodeActivation": "code_activation", "HeadHidden": "head_hidden", "DiscHidden": "disc_hidden", "FID": "fid", "LeakySlope": "leaky_slope"} {
		require.Equal(t, want, snake(in))
	}
	require.Equal(t, `inputs=6 hidden=[16] activation=relu label="a b"`,
		readableSettings(`{"Inputs":6,"Hidden":[16],"Activation":"relu","Dropout":0,"Linear":false,"HeadHidden":null,"Label":"a b"}`))
	require.Equal(t, "not json", readableSettings("not json"))
}

// score and encode work in chunks on every core and write in row order:
// the files are the same, byte for byte, at one thread and at two, for an
// autoencoder and a VAE, on more rows than three chunks hold.
func TestChunkedOutputsSameAtAnyThreadCount(t *testing.T) {
	dir := t.TempDir()
	var b strings.Builder
	b.WriteString("a,b,c,d\n")
	for i := 0; i < 3*chunkRows+17; i++ {
		fmt.Fprintf(&b, "%d,%d,%g,%g\n", i%13, i%7, math.Sin(float64(i)), math.Cos(float64(i)/3))
	}
	csvPath := filepath.Join(dir, "rows.csv")
	require.NoError(t, os.WriteFile(csvPath, []byte(b.String()), 0o644))
	for _, kind := range []string{"ae", "vae"} {
		ok(t, quern(t, dir, nil, "train", "-kind", kind, "-data", csvPath, "-out", kind+".qm", "-epochs", "1", "-quiet"))
		var outs [2][2][]byte
		for i, th := range []string{"GOMAXPROCS=1", "GOMAXPROCS=2"} {
			ok(t, quern(t, dir, []string{th}, "score", "-model", kind+".qm", "-data", csvPath, "-out", "s.csv", "-quiet"))
			ok(t, quern(t, dir, []string{th}, "encode", "-model", kind+".qm", "-data", csvPath, "-out", "c.csv", "-quiet"))
			var err error
			outs[i][0], err = os.ReadFile(filepath.Join(dir, "s.csv"))
			require.NoError(t, err)
			outs[i][1], err = os.ReadFile(filepath.Join(dir, "c.csv"))
			require.NoError(t, err)
		}
		require.Equal(t, outs[0][0], outs[1][0], "%s scores", kind)
		require.Equal(t, outs[0][1], outs[1][1], "%s codes", kind)
		require.Equal(t, 3*chunkRows+17+1, bytes.Count(outs[0][0], []byte("\n")))
	}
}

// Two runs that differ only in where they write give the same bytes
// (no output path is stored), and the files get the usual mode: 0644
// under the process's umask, readable by a server running as another
// user.
func TestOutputsIndependentOfOutAndReadable(t *testing.T) {
	dir := t.TempDir()
	require.NoError(t, os.Mkdir(filepath.Join(dir, "sub"), 0o755))
	for _, out := range []string{"a.qm", "sub/b.qm"} {
		ok(t, quern(t, dir, nil, "train", "-kind", "ae", "-data", bc, "-no-header", "-skip", "1", "-label", "c30", "-out", out, "-epochs", "2", "-every", "1", "-quiet"))
	}
	for _, suffix := range []string{"", ".ckpt"} {
		a, err := os.ReadFile(filepath.Join(dir, "a.qm"+suffix))
		require.NoError(t, err)
		b, err := os.ReadFile(filepath.Join(dir, "sub/b.qm"+suffix))
		require.NoError(t, err)
		require.True(t, bytes.Equal(a, b), "a.qm%s and sub/b.qm%s differ", suffix, suffix)
		st, err := os.Stat(filepath.Join(dir, "a.qm"+suffix))
		require.NoError(t, err)
		require.Equal(t, os.FileMode(0o644)&^currentUmask(), st.Mode().Perm())
	}
}

// Rows are read by the model's column names: reordered columns and extra
// ones give the same scores; a renamed column is an error naming it, not
// a silent read by position; -no-header reads by position on request.
func TestColumnsByName(t *testing.T) {
	dir := t.TempDir()
	write := func(name string, header string, order []int, extra bool) string {
		var b strings.Builder
		b.WriteString(header + "\n")
		for i := 0; i < 300; i++ {
			v := []float64{math.Sin(float64(i)), math.Cos(float64(i)), float64(i % 7)}
			for k, j := range order {
				if k > 0 {
					b.WriteByte(',')
				}
				fmt.Fprintf(&b, "%g", v[j])
			}
			if extra {
				fmt.Fprintf(&b, ",id%d", i)
			}
			b.WriteByte('\n')
		}
		p := filepath.Join(dir, name)
		require.NoError(t, os.WriteFile(p, []byte(b.String()), 0o644))
		return p
	}
	trainPath := write("train.csv", "a,b,c", []int{0, 1, 2}, false)
	ok(t, quern(t, dir, nil, "train", "-data", trainPath, "-out", "m.qm", "-epochs", "2", "-quiet"))
	ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", trainPath, "-out", "s1.csv", "-quiet"))
	ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", write("re.csv", "c,a,b,id", []int{2, 0, 1}, true), "-out", "s2.csv", "-quiet"))
	s1, err := os.ReadFile(filepath.Join(dir, "s1.csv"))
	require.NoError(t, err)
	s2, err := os.ReadFile(filepath.Join(dir, "s2.csv"))
	require.NoError(t, err)
	require.Equal(t, string(s1), string(s2), "reordered columns and an extra one: the same scores")
	r := quern(t, dir, nil, "score", "-model", "m.qm", "-data", write("renamed.csv", "a,b,temp", []int{0, 1, 2}, false), "-out", "s3.csv")
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, `the model's column "c" is not in the header (the model reads a, b, c by name, in any order)`)
	_, err = os.Stat(filepath.Join(dir, "s3.csv"))
	require.True(t, os.IsNotExist(err), "no score file on a refused read")
	ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", filepath.Join(dir, "renamed.csv"), "-columns", "a,b,temp", "-out", "s4.csv", "-quiet"))
	s4, err := os.ReadFile(filepath.Join(dir, "s4.csv"))
	require.NoError(t, err)
	require.Equal(t, string(s1), string(s4), "-columns maps the file's names to the model's")
}

// Training warns, with -quiet too, of too few rows, of columns that never
// change and of a code as wide as the inputs; a sound run warns of none.
func TestTrainWarnings(t *testing.T) {
	dir := t.TempDir()
	write := func(name string, rows int, constant bool) string {
		var b strings.Builder
		b.WriteString("a,b,c,d\n")
		for i := 0; i < rows; i++ {
			c := float64(i % 5)
			if constant {
				c = 3
			}
			fmt.Fprintf(&b, "%g,%g,%g,%g\n", math.Sin(float64(i)), math.Cos(float64(i)), c, float64(i%11))
		}
		p := filepath.Join(dir, name)
		require.NoError(t, os.WriteFile(p, []byte(b.String()), 0o644))
		return p
	}
	r := ok(t, quern(t, dir, nil, "train", "-data", write("small.csv", 20, true), "-out", "s.qm", "-epochs", "1", "-latent", "8", "-quiet"))
	require.Contains(t, r.stderr, "warning: 20 training rows: too few to learn from")
	require.Contains(t, r.stderr, "warning: c never changes")
	require.Contains(t, r.stderr, "warning: the code is 8 wide for 4 input columns")
	r = ok(t, quern(t, dir, nil, "train", "-data", write("ok.csv", 2000, false), "-out", "o.qm", "-epochs", "1", "-latent", "2", "-hidden", "3", "-quiet",
		"-weight-decay", "1e-4", "-clip", "5", "-adam-beta1", "0.8"))
	require.NotContains(t, r.stderr, "warning")
	r = ok(t, quern(t, dir, nil, "inspect", "o.qm"))
	require.Contains(t, r.stdout, `"beta1":0.8,"beta2":0.999,"weight_decay":0.0001,"clip_norm":5`, "the optimiser flags reach the run")
	r = quern(t, dir, nil, "train", "-data", "ok.csv", "-out", "x.qm", "-adam-beta2", "1")
	require.Equal(t, 2, r.code)
	require.Contains(t, r.stderr, "-adam-beta2 1: want a decay in [0, 1)")
	// a network of more than 4 weights a row is warned of; the default
	// width, chosen to keep to about that, is not
	mid := write("mid.csv", 120, false)
	r = ok(t, quern(t, dir, nil, "train", "-data", mid, "-out", "m.qm", "-hidden", "64", "-latent", "2", "-epochs", "1", "-quiet"))
	require.Contains(t, r.stderr, "warning: 120 training rows for 902 parameters (more than 4 a row)")
	r = ok(t, quern(t, dir, nil, "train", "-data", mid, "-out", "m.qm"))
	require.NotContains(t, r.stderr, "memorise")
	require.Contains(t, r.stderr, "chosen: hidden width")
	require.Contains(t, r.stderr, "chosen: cross-fitted over 5 folds")
}

// The defaults in the corners: without validation rows the whole step
// budget runs, said so; under 50 training rows held out by -val the score
// is the input distance alone, as when cross-fitting; a table too wide
// for the spectrum gets the largest default code; -quiet still prints
// the results; scoring the training rows warns that the scores are
// in-sample.
func TestDefaultsInTheCorners(t *testing.T) {
	dir := t.TempDir()
	table := func(name string, rows, cols int) string {
		var b strings.Builder
		for j := range cols {
			if j > 0 {
				b.WriteByte(',')
			}
			fmt.Fprintf(&b, "x%d", j)
		}
		b.WriteByte('\n')
		for i := range rows {
			for j := range cols {
				if j > 0 {
					b.WriteByte(',')
				}
				fmt.Fprintf(&b, "%.4g", math.Sin(float64(i*(j+1)))+0.1*float64(j%3))
			}
			b.WriteByte('\n')
		}
		p := filepath.Join(dir, name)
		require.NoError(t, os.WriteFile(p, []byte(b.String()), 0o644))
		return p
	}
	small := table("small.csv", 40, 4)
	r := ok(t, quern(t, dir, nil, "train", "-data", small, "-out", "a.qm", "-val", "0"))
	require.Contains(t, r.stderr, "chosen: length: 10000 epochs of 1 steps (about 10000 steps), without early stopping: there are no validation rows to stop on (-val 0)")
	require.Contains(t, r.stderr, "wrote a.qm: an autoencoder (ae), 10000 epochs")

	r = ok(t, quern(t, dir, nil, "train", "-data", small, "-out", "b.qm", "-val", "0.25", "-quiet"))
	require.Contains(t, r.stderr, "wrote b.qm", "-quiet prints the results")
	require.Contains(t, r.stderr, "threshold ")
	require.Contains(t, r.stderr, "on data like the 10 validation rows")
	require.NotContains(t, r.stderr, "chosen:")
	r = ok(t, quern(t, dir, nil, "inspect", "b.qm"))
	require.Contains(t, r.stdout, "format version 2")
	require.Contains(t, r.stdout, "score       input distance score", "30 training rows: the input distance alone")

	r = ok(t, quern(t, dir, nil, "score", "-model", "b.qm", "-data", small, "-out", "s.csv", "-quiet"))
	require.Contains(t, r.stderr, "holds the rows the model was trained on")
	other := table("other.csv", 12, 4)
	r = ok(t, quern(t, dir, nil, "score", "-model", "b.qm", "-data", other, "-out", "s2.csv", "-quiet"))
	require.NotContains(t, r.stderr, "trained on")

	// 60 rows of 30 columns: the code narrowed with the hidden layer, so
	// the defaults are not warned of as memorising
	r = ok(t, quern(t, dir, nil, "train", "-data", table("narrow.csv", 60, 30), "-out", "n.qm", "-epochs", "2", "-folds", "0"))
	require.Contains(t, r.stderr, "to keep about 4 weights per training row")
	require.NotContains(t, r.stderr, "memorise")

	wide := table("wide.csv", 12, data.SpectrumColumns+1)
	r = ok(t, quern(t, dir, nil, "train", "-data", wide, "-out", "w.qm", "-epochs", "1", "-val", "0", "-hidden", "64"))
	require.Contains(t, r.stderr, "chosen: code width 64: the largest default")
}

// score -keep copies columns, as they are, beside each row's score; a
// column the file lacks, or -keep on an idx file, is an error naming it.
func TestScoreKeepsColumns(t *testing.T) {
	dir := t.TempDir()
	var b strings.Builder
	b.WriteString("id,a,b,c,when\n")
	for i := 0; i < 300; i++ {
		fmt.Fprintf(&b, "dev-%03d,%g,%g,%d,\"2026-12-02 10:%02d\"\n", i, math.Sin(float64(i)), math.Cos(float64(i)), i%7, i%60)
	}
	p := filepath.Join(dir, "rows.csv")
	require.NoError(t, os.WriteFile(p, []byte(b.String()), 0o644))
	ok(t, quern(t, dir, nil, "train", "-data", p, "-columns", "a,b,c", "-out", "m.qm", "-epochs", "1", "-latent", "2", "-quiet"))
	ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", p, "-keep", "id,when", "-out", "s.csv", "-quiet"))
	out, err := os.ReadFile(filepath.Join(dir, "s.csv"))
	require.NoError(t, err)
	lines := strings.Split(strings.TrimSpace(string(out)), "\n")
	require.Len(t, lines, 301)
	require.True(t, strings.HasPrefix(lines[0], "row,id,when,score,threshold,anomaly,"), lines[0])
	require.True(t, strings.HasPrefix(lines[1], "1,dev-000,2026-12-02 10:00,"), lines[1])
	require.True(t, strings.HasPrefix(lines[300], "300,dev-299,2026-12-02 10:59,"), lines[300])
	r := quern(t, dir, nil, "score", "-model", "m.qm", "-data", p, "-keep", "site", "-out", "s2.csv")
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, `the column "site" to keep is not in the header`)
	r = quern(t, dir, nil, "score", "-model", "m.qm", "-data", fmImages, "-keep", "id", "-out", "s3.csv")
	require.NotEqual(t, 0, r.code)
}

// A semicolon- or tab-separated file is read as such without a flag, a
// gzip CSV on standard input (-data -) scores like the file, and
// -delimiter takes one character or tab.
func TestDialectsAndStandardInput(t *testing.T) {
	dir := t.TempDir()
	var comma, semi, tab strings.Builder
	for _, b := range []*strings.Builder{&comma, &semi, &tab} {
		b.WriteString("a,b,c\n")
	}
	for i := 0; i < 400; i++ {
		fmt.Fprintf(&comma, "%g,%g,%d\n", math.Sin(float64(i)), math.Cos(float64(i)), i%5)
	}
	semi.Reset()
	tab.Reset()
	semi.WriteString(strings.ReplaceAll(comma.String(), ",", ";"))
	tab.WriteString(strings.ReplaceAll(comma.String(), ",", "\t"))
	for name, text := range map[string]string{"c.csv": comma.String(), "s.csv": semi.String(), "t.tsv": tab.String()} {
		require.NoError(t, os.WriteFile(filepath.Join(dir, name), []byte(text), 0o644))
	}
	ok(t, quern(t, dir, nil, "train", "-data", "c.csv", "-out", "m.qm", "-epochs", "1", "-latent", "2", "-quiet"))
	ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", "c.csv", "-out", "ref.csv", "-quiet"))
	want, err := os.ReadFile(filepath.Join(dir, "ref.csv"))
	require.NoError(t, err)
	for _, f := range []string{"s.csv", "t.tsv"} {
		ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", f, "-out", "got.csv", "-quiet"))
		got, err := os.ReadFile(filepath.Join(dir, "got.csv"))
		require.NoError(t, err)
		require.Equal(t, string(want), string(got), f)
	}
	var z bytes.Buffer
	zw := gzip.NewWriter(&z)
	zw.Write([]byte(comma.String()))
	require.NoError(t, zw.Close())
	cmd := exec.Command(bin, "score", "-model", "m.qm", "-data", "-", "-out", "-", "-quiet")
	cmd.Dir = dir
	cmd.Stdin = &z
	got, err := cmd.Output()
	require.NoError(t, err)
	require.Equal(t, string(want), string(got), "gzip CSV on standard input")
	r := quern(t, dir, nil, "score", "-model", "m.qm", "-data", "s.csv", "-delimiter", ";;", "-out", "x.csv")
	require.Equal(t, 2, r.code)
	require.Contains(t, r.stderr, `-delimiter ";;": want one character`)
}

// quern evaluate: the figures of a labelled file agree with the anomaly
// package's (ROC AUC, counts at the threshold), the curves and page are
// written, and -recalibrate writes a copy whose threshold is set on the
// file's normal rows, the original left as it was.
func TestEvaluate(t *testing.T) {
	dir := t.TempDir()
	base := []string{"-data", bc, "-no-header", "-skip", "1", "-label", "c30"}
	ok(t, quern(t, dir, nil, append([]string{"train", "-out", "m.qm", "-epochs", "5", "-latent", "4", "-quiet"}, base...)...))
	before, err := os.ReadFile(filepath.Join(dir, "m.qm"))
	require.NoError(t, err)
	r := ok(t, quern(t, dir, nil, append([]string{"evaluate", "-model", "m.qm", "-normal", "1", "-out", "ev", "-recalibrate", "m2.qm", "-false-alarm", "0.05", "-quiet"}, base...)...))
	require.Contains(t, r.stdout, "evaluated 569 labelled rows")
	require.Contains(t, r.stdout, "357 normal, 212 anomalous")
	require.Regexp(t, `ROC AUC 0\.\d{4}, average precision 0\.\d{4}`, r.stdout)
	require.Contains(t, r.stderr, "decision aid")
	for _, f := range []string{"ev/curves.png", "ev/index.html", "m2.qm"} {
		_, err := os.Stat(filepath.Join(dir, f))
		require.NoError(t, err, f)
	}
	page, err := os.ReadFile(filepath.Join(dir, "ev/index.html"))
	require.NoError(t, err)
	require.Contains(t, string(page), "The 20 highest-scoring labelled rows and the columns behind each score")
	require.Regexp(t, `<td>c\d+ \d+% \(expected [-0-9.e]+, (above|below)\)`, string(page), "each top row names its columns with what was expected there")
	after, err := os.ReadFile(filepath.Join(dir, "m.qm"))
	require.NoError(t, err)
	require.Equal(t, before, after, "the original model is left as it was")
	m, err := model.Open(filepath.Join(dir, "m2.qm"))
	require.NoError(t, err)
	th := m.(model.Scorer).Calibrated()
	require.NotNil(t, th)
	require.Equal(t, 357, th.Rows, "set on the normal rows")
	// the printed counts are the anomaly package's at that threshold
	d, err := data.LoadCSV(bc, data.CSVConfig{NoHeader: true, SkipLines: 1, Label: "c30"})
	require.NoError(t, err)
	s, err := m.(model.Scorer).RowScores(d.X, d.Rows)
	require.NoError(t, err)
	pos := make([]bool, d.Rows)
	for i, l := range d.Labels {
		pos[i] = l != 1
	}
	auc, err := anomaly.ROCAUC(s, pos)
	require.NoError(t, err)
	c, err := anomaly.CountsAt(s, pos, th.Value)
	require.NoError(t, err)
	require.Contains(t, r.stdout, fmt.Sprintf("ROC AUC %.4f", auc))
	require.Contains(t, r.stdout, fmt.Sprintf("%d anomalous rows flagged, %d missed; %d normal rows flagged, %d passed", c.TP, c.FN, c.FP, c.TN))
	r = quern(t, dir, nil, append([]string{"evaluate", "-model", "m.qm"}, base[:5]...)...)
	require.Equal(t, 2, r.code)
	require.Contains(t, r.stderr, "-label COLUMN (CSV) or -labels FILE (idx) is required")
}

// evaluate reads text labels too: on the demo's hold-out week (faults
// named in text, healthy readings empty) it gives the demo's own
// precision, recall and ROC AUC, which the demo computes with the anomaly
// package from the fleet's known labels.
func TestEvaluateTextLabelsMatchDemo(t *testing.T) {
	dir := t.TempDir()
	demoOut := ok(t, quern(t, dir, nil, "demo", "-short", "-out", "d", "-quiet"))
	r := ok(t, quern(t, dir, nil, "evaluate", "-model", "d/pumps.qm", "-data", "d/holdout.csv", "-label", "fault", "-normal", "empty", "-quiet"))
	var prec, rec, auc float64
	_, err := fmt.Sscanf(demoOut.stdout[strings.Index(demoOut.stdout, "Hold-out week:"):], "Hold-out week: precision %f, recall %f at the threshold; ROC AUC %f.", &prec, &rec, &auc)
	require.NoError(t, err)
	var eAUC, eAP, eBase, ePrec, eRec float64
	lines := strings.Split(r.stdout, "\n")
	_, err = fmt.Sscanf(lines[1], "ROC AUC %f, average precision %f (a random order scores %f)", &eAUC, &eAP, &eBase)
	require.NoError(t, err, lines[1])
	_, err = fmt.Sscanf(lines[3], "precision %f, recall %f", &ePrec, &eRec)
	require.NoError(t, err, lines[3])
	require.InDelta(t, auc, eAUC, 5e-4+1e-9, "the demo prints three digits, evaluate four")
	require.InDelta(t, prec, ePrec, 5e-4+1e-9)
	require.InDelta(t, rec, eRec, 5e-4+1e-9)
}
