package main

import (
	"bytes"
	"fmt"
	"image/png"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/modelfile"
	"github.com/stretchr/testify/require"
)

var bin string

func TestMain(m *testing.M) {
	dir, err := os.MkdirTemp("", "quern-bin")
	if err != nil {
		panic(err)
	}
	bin = filepath.Join(dir, "quern")
	if runtime.GOOS == "windows" {
		bin += ".exe"
	}
	out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput()
	if err != nil {
		os.Stderr.Write(out)
		panic(err)
	}
	code := m.Run()
	os.RemoveAll(dir)
	os.Exit(code)
}

type result struct {
	code           int
	stdout, stderr string
}

func quern(t *testing.T, dir string, env []string, args ...string) result {
	t.Helper()
	cmd := exec.Command(bin, args...)
	cmd.Dir = dir
	cmd.Env = append(os.Environ(), env...)
	var so, se bytes.Buffer
	cmd.Stdout, cmd.Stderr = &so, &se
	err := cmd.Run()
	code := 0
	if ee, ok := err.(*exec.ExitError); ok {
		code = ee.ExitCode()
	} else if err != nil {
		t.Fatal(err)
	}
	return result{code, so.String(), se.String()}
}

func ok(t *testing.T, r result) result {
	t.Helper()
	require.Equal(t, 0, r.code, "stderr: %s", r.stderr)
	return r
}

func abs(p string) string {
	a, _ := filepath.Abs(p)
	return a
}

var bc = abs("../../testdata/sklearn/breast_cancer.csv")
var fmImages = abs("../../testdata/fashion-mnist/t10k-images-idx3-ubyte-first500.gz")
var fmLabels = abs("../../testdata/fashion-mnist/t10k-labels-idx1-ubyte-first500.gz")

func TestTrainScoreEncodeInspectCSV(t *testing.T) {
	dir := t.TempDir()
	ok(t, quern(t, dir, nil, "train", "-kind", "ae", "-data", bc, "-no-header", "-skip", "1", "-label", "c30", "-out", "bc.qm",
		"-epochs", "3", "-hidden", "8", "-latent", "3", "-val", "0.3", "-quiet"))
	r := ok(t, quern(t, dir, nil, "score", "-model", "bc.qm", "-data", bc, "-no-header", "-skip", "1", "-label", "c30", "-out", "scores.csv"))
	require.Contains(t, r.stderr, "decision aid")
	scores, err := data.LoadCSV(filepath.Join(dir, "scores.csv"), data.CSVConfig{Columns: []string{"row", "score", "threshold"}})
	require.NoError(t, err)
	require.Equal(t, 569, scores.Rows)
	head, err := os.ReadFile(filepath.Join(dir, "scores.csv"))
	require.NoError(t, err)
	require.True(t, strings.HasPrefix(string(head), "row,score,threshold,anomaly,feature1,share1,expected1,direction1,feature2,share2,expected2,direction2,feature3,share3,expected3,direction3,status\n"))
	r = ok(t, quern(t, dir, nil, "encode", "-model", "bc.qm", "-data", bc, "-no-header", "-skip", "1", "-label", "c30"))
	require.Equal(t, 570, strings.Count(r.stdout, "\n"))
	require.True(t, strings.HasPrefix(r.stdout, "z0,z1,z2\n"))
	r = ok(t, quern(t, dir, nil, "inspect", "bc.qm"))
	for _, s := range []string{"kind        ae", "checksum verified", "threshold", "fingerprint", "encoder     30->8", "summary     3 epochs, final training loss"} {
		require.Contains(t, r.stdout, s)
	}
}

func TestImageModels(t *testing.T) {
	dir := t.TempDir()
	ok(t, quern(t, dir, nil, "train", "-kind", "vae", "-data", fmImages, "-labels", fmLabels, "-out", "fm.qm", "-epochs", "1", "-hidden", "64", "-latent", "2", "-quiet", "-report", "rep"))
	ok(t, quern(t, dir, nil, "sample", "-model", "fm.qm", "-n", "8", "-out", "s.png"))
	ok(t, quern(t, dir, nil, "sample", "-model", "fm.qm", "-n", "3", "-out", "s.csv"))
	ok(t, quern(t, dir, nil, "interpolate", "-model", "fm.qm", "-data", fmImages, "-from", "1", "-to", "2", "-steps", "5", "-out", "i.png"))
	for _, f := range []string{"s.png", "i.png", "rep/index.html", "rep/curves.png", "rep/samples.png", "rep/latent.png"} {
		st, err := os.Stat(filepath.Join(dir, f))
		require.NoError(t, err, f)
		require.Greater(t, st.Size(), int64(100), f)
	}
	s, err := data.LoadCSV(filepath.Join(dir, "s.csv"), data.CSVConfig{})
	require.NoError(t, err)
	require.Equal(t, 3, s.Rows)
	require.Equal(t, 784, s.Cols)

	// a folder of PNG images, told apart by content, trains a GAN
	imgs := filepath.Join(dir, "imgs")
	require.NoError(t, os.Mkdir(imgs, 0o755))
	fm, err := data.LoadIDX(fmImages, data.IDXConfig{})
	require.NoError(t, err)
	for i := 0; i < 40; i++ {
		require.NoError(t, data.WritePNG(filepath.Join(imgs, fmt.Sprintf("img%03d.png", i)), fm.Row(i), 28, 28, 1))
	}
	ok(t, quern(t, dir, nil, "train", "-kind", "gan", "-data", imgs, "-out", "g.qm", "-epochs", "1", "-hidden", "32", "-batch", "8", "-quiet"))
	ok(t, quern(t, dir, nil, "sample", "-model", "g.qm", "-n", "4", "-out", "g.png"))
	r := ok(t, quern(t, dir, nil, "inspect", "g.qm"))
	require.Contains(t, r.stdout, "generator")
}

// Convolutional models through the command line: each kind trains with
// -channels, inspect shows the convolutions, score writes heat maps of
// the flagged images (two panels side by side), and encode, sample and
// interpolate work as for dense models.
func TestConvModels(t *testing.T) {
	dir := t.TempDir()
	r := ok(t, quern(t, dir, nil, "train", "-kind", "vae", "-data", fmImages, "-out", "v.qm", "-epochs", "2", "-channels", "8,16", "-latent", "4", "-false-alarm", "0.05", "-report", "rep"))
	require.Contains(t, r.stderr, "hidden layers: none, the convolutions' innermost maps meet the code directly")
	for _, f := range []string{"rep/index.html", "rep/samples.png", "rep/latent.png"} {
		st, err := os.Stat(filepath.Join(dir, f))
		require.NoError(t, err, f)
		require.Greater(t, st.Size(), int64(100), f)
	}
	r = ok(t, quern(t, dir, nil, "inspect", "v.qm"))
	require.Contains(t, r.stdout, "encoder     28x28x1->14x14x8 conv 3x3 relu, 14x14x8->7x7x16 conv 3x3 relu, 784->8 identity")
	require.Contains(t, r.stdout, "decoder     4->784 relu, 7x7x16->14x14x8 transposed conv 3x3 relu, 14x14x8->28x28x1 transposed conv 3x3 identity")
	r = ok(t, quern(t, dir, nil, "score", "-model", "v.qm", "-data", fmImages, "-out", "s.csv", "-heatmaps", "heat"))
	require.Regexp(t, `wrote [1-9][0-9]* heat maps? in heat`, r.stderr)
	maps, err := filepath.Glob(filepath.Join(dir, "heat", "row-*.png"))
	require.NoError(t, err)
	require.NotEmpty(t, maps)
	f, err := os.Open(maps[0])
	require.NoError(t, err)
	cfg, err := png.DecodeConfig(f)
	f.Close()
	require.NoError(t, err)
	require.Equal(t, 2*28*4+3*2, cfg.Width, "image and heat map side by side, 4 times their size")
	ok(t, quern(t, dir, nil, "encode", "-model", "v.qm", "-data", fmImages, "-out", "z.csv"))
	ok(t, quern(t, dir, nil, "sample", "-model", "v.qm", "-n", "8", "-out", "s.png"))
	ok(t, quern(t, dir, nil, "interpolate", "-model", "v.qm", "-data", fmImages, "-steps", "4", "-out", "i.png"))
	ok(t, quern(t, dir, nil, "train", "-kind", "ae", "-data", fmImages, "-out", "a.qm", "-epochs", "1", "-channels", "4", "-quiet"))
	ok(t, quern(t, dir, nil, "score", "-model", "a.qm", "-data", fmImages, "-out", "sa.csv", "-heatmaps", "heat-ae"))
	ok(t, quern(t, dir, nil, "train", "-kind", "gan", "-data", fmImages, "-out", "g.qm", "-epochs", "1", "-channels", "4,8", "-quiet"))
	r = ok(t, quern(t, dir, nil, "inspect", "g.qm"))
	require.Contains(t, r.stdout, "14x14x4->28x28x1 transposed conv 3x3 sigmoid")
	ok(t, quern(t, dir, nil, "sample", "-model", "g.qm", "-n", "4", "-out", "g.png"))

	// a folder of PNG images as well as an idx file
	imgs := filepath.Join(dir, "imgs")
	require.NoError(t, os.Mkdir(imgs, 0o755))
	fm, err := data.LoadIDX(fmImages, data.IDXConfig{})
	require.NoError(t, err)
	for i := 0; i < 24; i++ {
		require.NoError(t, data.WritePNG(filepath.Join(imgs, fmt.Sprintf("img%03d.png", i)), fm.Row(i), 28, 28, 1))
	}
	ok(t, quern(t, dir, nil, "train", "-kind", "ae", "-data", imgs, "-out", "p.qm", "-epochs", "1", "-channels", "4", "-batch", "8", "-quiet"))
	r = ok(t, quern(t, dir, nil, "inspect", "p.qm"))
	require.Contains(t, r.stdout, "28x28x1->14x14x4 conv 3x3")

	ok(t, quern(t, dir, nil, "train", "-data", bc, "-no-header", "-skip", "1", "-out", "t.qm", "-epochs", "1", "-quiet"))
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"train", "-data", bc, "-no-header", "-skip", "1", "-out", "m.qm", "-channels", "8"}, "-channels: convolutions read images (a folder of PNG files or an idx file), and " + bc + " is a table"},
		{[]string{"train", "-data", fmImages, "-out", "m.qm", "-channels", "8,x"}, `-channels: "x" is not a positive width`},
		{[]string{"train", "-data", fmImages, "-out", "m.qm", "-channels", "8", "-kernel", "99"}, "-kernel 99: want a side of 1 to 64"},
		{[]string{"train", "-data", fmImages, "-out", "m.qm", "-channels", "100000,100000"}, "-channels 100000,100000 -kernel 3 on 28x28x1 images: convolution 2: makes the network too large"},
		{[]string{"train", "-data", fmImages, "-out", "m.qm", "-channels", "8,8,8,8,8,8", "-kernel", "2"}, "convolution 5: its 1x1 input is too small for a 2x2 kernel at stride 2"},
		{[]string{"train", "-kind", "gan", "-data", fmImages, "-out", "m.qm", "-channels", "8", "-pack", "2"}, "pack 2 needs dense layers only"},
		{[]string{"score", "-model", "t.qm", "-data", bc, "-no-header", "-skip", "1", "-out", "x.csv", "-heatmaps", "h"}, "-heatmaps draws images, and " + bc + " holds a table"},
		{[]string{"score", "-model", "a.qm", "-data", dir, "-out", "x.csv", "-heatmaps", dir}, "is the -data folder"},
	} {
		r := quern(t, dir, nil, c.args...)
		require.NotEqual(t, 0, r.code, "%v", c.args)
		require.Contains(t, r.stderr, c.want, "%v", c.args)
		require.NotContains(t, r.stderr, "goroutine")
	}
}

// Bad input gives a one-line error naming the problem and a non-zero exit,
// never a stack trace; usage errors exit with 2.
func TestBadInput(t *testing.T) {
	dir := t.TempDir()
	write := func(name, s string) string {
		p := filepath.Join(dir, name)
		require.NoError(t, os.WriteFile(p, []byte(s), 0o644))
		return p
	}
	mixed := filepath.Join(dir, "mixed")
	require.NoError(t, os.Mkdir(mixed, 0o755))
	require.NoError(t, data.WritePNG(filepath.Join(mixed, "a.png"), make([]float32, 4), 2, 2, 1))
	require.NoError(t, data.WritePNG(filepath.Join(mixed, "b.png"), make([]float32, 6), 2, 3, 1))
	cases := []struct {
		name string
		args []string
		code int
		want string
	}{
		{"ragged", []string{"train", "-data", write("r.csv", "a,b\n1,2\n3\n"), "-out", "m.qm"}, 1, "r.csv:3"},
		{"infinite", []string{"train", "-data", write("n.csv", "a,b\n1,2\n3,inf\n"), "-out", "m.qm"}, 1, `n.csv:3: column 2 (b): "inf" is outside the float32 range`},
		{"idx size", []string{"train", "-data", write("x.idx", "\x00\x00\x08\x02\x00\x00\x00\x05\x00\x00\x00\x02ab"), "-out", "m.qm"}, 1, "declares"},
		{"idx magic", []string{"train", "-data", write("images-idx3-ubyte", "\x08\x03\x00\x00\x00\x00\x00\x01\x00\x00\x00\x01\x00\x00\x00\x01a"), "-out", "m.qm"}, 1, "not an idx file (magic"},
		{"mixed images", []string{"train", "-data", mixed, "-out", "m.qm"}, 1, "b.png"},
		{"missing file", []string{"train", "-data", filepath.Join(dir, "nope.csv"), "-out", "m.qm"}, 1, "nope.csv"},
		{"unknown flag", []string{"train", "-bogus"}, 2, "quern train: unknown flag -bogus (quern train -h lists the flags)"},
		{"folds and val", []string{"train", "-data", bc, "-out", "m.qm", "-folds", "3", "-val", "0.2"}, 2, "-folds 3 with -val 0.2"},
		{"folds and bce", []string{"train", "-data", bc, "-out", "m.qm", "-folds", "3", "-loss", "bce"}, 2, "-folds with -loss bce"},
		{"folds of a vae", []string{"train", "-data", bc, "-out", "m.qm", "-folds", "3", "-kind", "vae"}, 2, "cross-fitting is for autoencoders"},
		{"misspelt command", []string{"trian"}, 2, `quern: unknown command "trian": did you mean train?`},
		{"numbers for a header", []string{"train", "-data", write("nh.csv", "1,2,1\n3,4,5\n"), "-out", "m.qm"}, 1, "duplicate column name (the first line holds numbers: a file without a header? say so with -no-header)"},
		{"misspelt flag", []string{"train", "-fold", "3"}, 2, "quern train: unknown flag -fold: did you mean -folds? (quern train -h lists the flags)"},
		{"bad number", []string{"train", "-epochs", "x"}, 2, `-epochs "x": want a whole number`},
		{"bad duration", []string{"serve", "-drain", "5"}, 2, "-drain \"5\": want a duration"},
		{"negative latent", []string{"train", "-data", bc, "-out", "m.qm", "-latent", "-3"}, 2, "-latent -3: want at least 1"},
		{"negative rate", []string{"train", "-data", bc, "-out", "m.qm", "-rate", "-1"}, 2, "-rate -1: want a positive learning rate"},
		{"val range", []string{"train", "-data", bc, "-out", "m.qm", "-val", "1.5"}, 2, "-val 1.5: want a fraction in [0, 1)"},
		{"false alarm range", []string{"train", "-data", bc, "-out", "m.qm", "-false-alarm", "2"}, 2, "-false-alarm 2: want a rate between 0 and 1"},
		{"out folder missing", []string{"train", "-data", bc, "-out", "/nonexistent/dir/x.qm"}, 1, "-out /nonexistent/dir/x.qm: the folder /nonexistent/dir does not exist"},
		{"inspect missing", []string{"inspect", "nothere.qm"}, 1, "nothere.qm: no such file or directory"},
		{"open server without token", []string{"serve", "-model", "m.qm", "-addr", "0.0.0.0:0"}, 2, "-addr 0.0.0.0:0 is reachable from other machines and no -token-env is set"},
		{"unknown command", []string{"frobnicate"}, 2, "unknown command"},
		{"missing out", []string{"train", "-data", bc}, 2, "-out is required"},
		{"bad kind", []string{"train", "-data", bc, "-out", "m.qm", "-kind", "rbm"}, 2, "-kind"},
		{"corrupt model", []string{"inspect", write("bad.qm", "QUERNMDL garbage that is long enough to be checked properly..........")}, 1, "corrupt"},
		{"missing model", []string{"score", "-data", bc}, 2, "-model is required"},
		{"row limit", []string{"train", "-data", write("l.csv", "a,b\n1,2\n3,4\n5,6\n"), "-out", "m.qm", "-limit", "rows=2"}, 1, "l.csv line 4: more than 2 rows, beyond the rows limit of 2 (raise it with -limit rows=N)"},
		{"unknown limit", []string{"train", "-data", bc, "-out", "m.qm", "-limit", "cells=2"}, 2, `unknown limit "cells"`},
		{"bom", []string{"train", "-data", write("bom.csv", "\ufeffa,b\n1,2\n"), "-columns", "a", "-val", "0", "-out", filepath.Join(dir, "bom.qm"), "-epochs", "1", "-quiet"}, 0, ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := quern(t, dir, nil, c.args...)
			require.Equal(t, c.code, r.code, r.stderr)
			require.Contains(t, r.stderr, c.want)
			require.NotContains(t, r.stderr, "goroutine")
			require.NotContains(t, r.stderr, "panic")
			if c.code == 1 {
				require.Equal(t, 1, strings.Count(strings.TrimSpace(r.stderr), "\n")+1, "one line: %q", r.stderr)
			}
		})
	}
	for _, c := range []string{"train", "score", "encode", "sample", "interpolate", "inspect", "demo", "serve", "version", "evaluate", "fidelity"} {
		r := quern(t, dir, nil, c, "-h")
		require.Equal(t, 0, r.code)
		require.Equal(t, 1, strings.Count(r.stderr, "usage: quern "+c), "%s -h prints its usage once:\n%s", c, r.stderr)
		if c != "version" && c != "inspect" {
			require.Contains(t, r.stderr, "\n  -", "%s -h lists the flags", c)
		}
	}
	for _, r := range []result{quern(t, dir, nil, "train", "-bogus"), quern(t, dir, nil, "frobnicate")} {
		require.Equal(t, 1, strings.Count(strings.TrimSpace(r.stderr), "\n")+1, "one line: %q", r.stderr)
	}
}

func TestVersion(t *testing.T) {
	r := ok(t, quern(t, t.TempDir(), nil, "version"))
	r.stdout = "\n" + r.stdout
	for _, label := range []string{"quern ", "go ", "platform ", "kernel ", "threads "} {
		require.Contains(t, r.stdout, "\n"+label, "version names %q:\n%s", label, r.stdout)
	}
	require.Contains(t, r.stdout, runtime.Version())
}

func resumeArgs() []string {
	return []string{"train", "-kind", "ae", "-data", bc, "-no-header", "-skip", "1", "-label", "c30", "-out", "m.qm",
		"-epochs", "6", "-hidden", "8", "-latent", "3", "-val", "0.3", "-every", "1", "-quiet"}
}

// A run killed during a checkpoint save, then resumed, ends with a model
// file bitwise identical to an uninterrupted run's.
func TestResumeAfterCrashDuringSave(t *testing.T) {
	straight, crashed := t.TempDir(), t.TempDir()
	ok(t, quern(t, straight, nil, resumeArgs()...))
	r := quern(t, crashed, []string{"QUERN_TEST_CRASH_IN_SAVE=3"}, resumeArgs()...)
	require.Equal(t, 3, r.code, r.stderr)
	_, err := os.Stat(filepath.Join(crashed, "m.qm"))
	require.True(t, os.IsNotExist(err))
	r = quern(t, crashed, nil, "score", "-model", "m.qm.ckpt", "-data", bc, "-no-header", "-skip", "1", "-label", "c30")
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, "is a checkpoint")
	ok(t, quern(t, crashed, nil, "train", "-resume", "m.qm.ckpt", "-quiet"))
	a, err := os.ReadFile(filepath.Join(straight, "m.qm"))
	require.NoError(t, err)
	b, err := os.ReadFile(filepath.Join(crashed, "m.qm"))
	require.NoError(t, err)
	require.True(t, bytes.Equal(a, b), "resumed model differs from the uninterrupted one")
	r = quern(t, crashed, nil, "train", "-resume", "m.qm.ckpt", "-batch", "9")
	require.Equal(t, 2, r.code)
	require.Contains(t, r.stderr, "cannot be changed")
	// a run taken further: the checkpoint (epoch 6) resumed to 8 epochs
	ok(t, quern(t, crashed, nil, "train", "-resume", "m.qm.ckpt", "-epochs", "8", "-out", "m8.qm", "-quiet"))
	r = ok(t, quern(t, crashed, nil, "inspect", "m8.qm"))
	require.Contains(t, r.stdout, "summary     8 epochs")
}

// Taking a run further with -epochs keeps the rest of its settings
// (patience among them), and -data records the file it was given.
func TestResumeKeepsPatience(t *testing.T) {
	dir := t.TempDir()
	args := append(resumeArgs(), "-patience", "40")
	require.Equal(t, "-epochs", args[12])
	args[13] = "2"
	ok(t, quern(t, dir, nil, args...))
	moved := filepath.Join(dir, "moved.csv")
	b, err := os.ReadFile(bc)
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(moved, b, 0o644))
	ok(t, quern(t, dir, nil, "train", "-resume", "m.qm.ckpt", "-epochs", "3", "-data", moved, "-out", "m3.qm", "-quiet"))
	f, err := modelfile.Read(filepath.Join(dir, "m3.qm"), 0)
	require.NoError(t, err)
	var tr struct {
		Settings struct {
			Epochs   int `json:"epochs"`
			Patience int `json:"patience"`
		} `json:"settings"`
	}
	found, err := f.Section("training", &tr)
	require.NoError(t, err)
	require.True(t, found)
	require.Equal(t, 3, tr.Settings.Epochs)
	require.Equal(t, 40, tr.Settings.Patience, "-epochs on resume dropped the patience")
	var rec runRecord
	found, err = f.Section(commandSection, &rec)
	require.NoError(t, err)
	require.True(t, found)
	require.Equal(t, moved, rec.Data.Path)
}

// A checkpoint written by the command line before the architecture change
// (testdata/compat/cli-ae.ckpt: settings stored as command-line strings,
// among them an output path in a temporary folder) resumes to the model of
// the uninterrupted run, bitwise in every tensor, and writes where it is
// told, not where the checkpoint says.
func TestResumeOldCheckpoint(t *testing.T) {
	dir := t.TempDir()
	old, err := os.ReadFile(abs("../../testdata/compat/cli-ae.ckpt"))
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(filepath.Join(dir, "old.ckpt"), old, 0o644))
	r := quern(t, dir, nil, "train", "-resume", "old.ckpt", "-quiet")
	require.Equal(t, 1, r.code, "the stored data path is relative to another folder")
	require.Contains(t, r.stderr, "breast_cancer.csv")
	ok(t, quern(t, dir, nil, "train", "-resume", "old.ckpt", "-data", bc, "-quiet"))
	got, err := modelfile.Read(filepath.Join(dir, "old"), 0)
	require.NoError(t, err)
	want, err := modelfile.Read(abs("../../testdata/compat/cli-ae.qm"), 0)
	require.NoError(t, err)
	for _, w := range want.Tensors {
		g, ok := got.Tensor(w.Name)
		require.True(t, ok, w.Name)
		require.Equal(t, w.F32, g.F32, w.Name)
	}
	var th struct{ Value float64 }
	_, err = want.Section("threshold", &th)
	require.NoError(t, err)
	m, err := ae.FromFile(got)
	require.NoError(t, err)
	require.Equal(t, th.Value, m.Threshold.Value)
}

// No command writes over its own input, and a bad -out is found before
// any training.
func TestOutputNeverReplacesInput(t *testing.T) {
	dir := t.TempDir()
	data := filepath.Join(dir, "x.csv")
	b, err := os.ReadFile(bc)
	require.NoError(t, err)
	require.NoError(t, os.WriteFile(data, b, 0o644))
	for _, args := range [][]string{
		{"train", "-data", data, "-no-header", "-skip", "1", "-out", data},
		{"train", "-data", data, "-no-header", "-skip", "1", "-out", "m.qm", "-every", "1", "-checkpoint", "./x.csv"},
		{"score", "-model", "m.qm", "-data", data, "-out", data},
	} {
		r := quern(t, dir, nil, args...)
		require.Equal(t, 2, r.code, "%v: %s", args, r.stderr)
		require.Contains(t, r.stderr, "the same file")
	}
	after, err := os.ReadFile(data)
	require.NoError(t, err)
	require.Equal(t, b, after)
	r := quern(t, dir, nil, "train", "-data", data, "-no-header", "-skip", "1", "-out", filepath.Join(dir, "no", "such", "m.qm"))
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, "does not exist")
}

// A run killed by SIGKILL once its first checkpoint exists also resumes to
// the same model.
func TestResumeAfterKill(t *testing.T) {
	if runtime.GOOS == "windows" {
		t.Skip("no SIGKILL")
	}
	straight, killed := t.TempDir(), t.TempDir()
	ok(t, quern(t, straight, nil, resumeArgs()...))
	cmd := exec.Command(bin, resumeArgs()...)
	cmd.Dir = killed
	require.NoError(t, cmd.Start())
	deadline := time.Now().Add(30 * time.Second)
	for time.Now().Before(deadline) {
		if _, err := os.Stat(filepath.Join(killed, "m.qm.ckpt")); err == nil {
			break
		}
		time.Sleep(2 * time.Millisecond)
	}
	cmd.Process.Signal(syscall.SIGKILL)
	cmd.Wait()
	if _, err := os.Stat(filepath.Join(killed, "m.qm.ckpt")); err != nil {
		t.Skip("the run ended before a checkpoint appeared")
	}
	ok(t, quern(t, killed, nil, "train", "-resume", "m.qm.ckpt", "-quiet"))
	a, err := os.ReadFile(filepath.Join(straight, "m.qm"))
	require.NoError(t, err)
	b, err := os.ReadFile(filepath.Join(killed, "m.qm"))
	require.NoError(t, err)
	require.True(t, bytes.Equal(a, b), "resumed model differs from the uninterrupted one")
}

func TestDemoShort(t *testing.T) {
	dir := t.TempDir()
	r := ok(t, quern(t, dir, nil, "demo", "-short", "-out", "d", "-quiet"))
	require.Empty(t, r.stderr, "-quiet: no progress")
	for _, s := range []string{"precision", "recall", "decision aid"} {
		require.Contains(t, r.stdout, s, "-quiet still prints the findings")
	}
	r = ok(t, quern(t, dir, nil, "demo", "-short", "-out", "d2"))
	for _, s := range []string{"precision", "recall", "decision aid"} {
		require.Contains(t, r.stdout, s)
	}
	require.Regexp(t, `\ntime: generate [^;]+, train [^;]+, calibrate [^;]+, write [^;]+, score [^;]+, report [^;]+; \S+ in all\n$`, r.stderr)
	require.NotContains(t, r.stdout, " in 0s")
	for _, f := range []string{"pumps.qm", "holdout-scores.csv", "report/index.html", "report/scores.png"} {
		_, err := os.Stat(filepath.Join(dir, "d2", f))
		require.NoError(t, err, f)
	}
}

// quern serve answers over loopback, reloads on SIGHUP and exits cleanly
// on SIGTERM.
func TestServeSignals(t *testing.T) {
	if runtime.GOOS == "windows" {
		t.Skip("no SIGHUP")
	}
	dir := t.TempDir()
	ok(t, quern(t, dir, nil, "train", "-kind", "ae", "-data", bc, "-no-header", "-skip", "1", "-label", "c30", "-out", "m.qm",
		"-epochs", "2", "-hidden", "8", "-latent", "3", "-val", "0.3", "-threshold", "max", "-quiet"))
	cmd := exec.Command(bin, "serve", "-model", "m.qm", "-addr", "127.0.0.1:0")
	cmd.Dir = dir
	stderr, err := cmd.StderrPipe()
	require.NoError(t, err)
	require.NoError(t, cmd.Start())
	defer cmd.Process.Kill()
	lines := make(chan string, 100)
	go func() {
		buf := make([]byte, 0, 4096)
		tmp := make([]byte, 1024)
		for {
			n, err := stderr.Read(tmp)
			buf = append(buf, tmp[:n]...)
			for {
				i := bytes.IndexByte(buf, '\n')
				if i < 0 {
					break
				}
				lines <- string(buf[:i])
				buf = buf[i+1:]
			}
			if err != nil {
				close(lines)
				return
			}
		}
	}()
	wait := func(sub string) string {
		deadline := time.After(20 * time.Second)
		for {
			select {
			case l, more := <-lines:
				if !more {
					t.Fatalf("server exited before logging %q", sub)
				}
				if strings.Contains(l, sub) {
					return l
				}
			case <-deadline:
				t.Fatalf("no log line with %q", sub)
			}
		}
	}
	line := wait(`"msg":"serving"`)
	i := strings.Index(line, `"addr":"`)
	require.Greater(t, i, 0, line)
	addr := line[i+8:]
	addr = addr[:strings.IndexByte(addr, '"')]
	resp, err := http.Get("http://" + addr + "/healthz")
	require.NoError(t, err)
	resp.Body.Close()
	require.Equal(t, 200, resp.StatusCode)
	require.NoError(t, cmd.Process.Signal(syscall.SIGHUP))
	wait("model reloaded")
	require.NoError(t, cmd.Process.Signal(syscall.SIGTERM))
	wait("shutting down")
	require.NoError(t, cmd.Wait())
}

// A VAE trained with a validation split scores rows by negative ELBO.
func TestVAEScore(t *testing.T) {
	dir := t.TempDir()
	ok(t, quern(t, dir, nil, "train", "-kind", "vae", "-likelihood", "gaussian_learned", "-data", bc, "-no-header", "-skip", "1", "-label", "c30",
		"-out", "v.qm", "-epochs", "3", "-hidden", "16", "-latent", "2", "-val", "0.3", "-threshold", "max", "-quiet"))
	r := ok(t, quern(t, dir, nil, "score", "-model", "v.qm", "-data", bc, "-no-header", "-skip", "1", "-label", "c30", "-top", "1"))
	require.Contains(t, r.stderr, "decision aid")
	lines := strings.Split(strings.TrimSpace(r.stdout), "\n")
	require.Len(t, lines, 570)
	require.Equal(t, "row,score,threshold,anomaly,feature1,share1,expected1,direction1,status", lines[0])
	first := strings.Split(lines[1], ",")
	require.Len(t, first, 9)
	_, err := strconv.ParseFloat(first[6], 64)
	require.NoError(t, err, "the expected value is the reconstruction, a number: %s", lines[1])
	require.Contains(t, []string{"above", "below"}, first[7])
	require.Contains(t, quern(t, dir, nil, "inspect", "v.qm").stdout, "threshold")
}
