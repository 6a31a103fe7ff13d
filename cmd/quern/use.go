package main

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/vae"
)

// loaded is a model read from a file, whichever its kind.
type loaded struct {
	file *modelfile.File
	ae   *ae.Model
	vae  *vae.Model
	gan  *gan.Model
	prov *modelfile.Provenance
}

func loadModel(path string) (*loaded, error) {
	if path == "" {
		return nil, usagef("-model is required")
	}
	f, err := modelfile.Read(path, 0)
	if err != nil {
		return nil, err
	}
	l := &loaded{file: f}
	switch f.Kind {
	case ae.Kind:
		l.ae, _, l.prov, err = ae.FromFile(f)
	case vae.Kind:
		l.vae, _, l.prov, err = vae.FromFile(f)
	case gan.Kind:
		l.gan, _, l.prov, err = gan.FromFile(f)
	default:
		err = fmt.Errorf("%s holds an unknown model kind %q", path, f.Kind)
	}
	return l, err
}

func provenanceOf(f *modelfile.File) (*modelfile.Provenance, error) {
	var m struct {
		Provenance *modelfile.Provenance `json:"provenance"`
	}
	if err := json.Unmarshal(f.Meta, &m); err != nil {
		return nil, fmt.Errorf("model metadata: %w", err)
	}
	return m.Provenance, nil
}

// output opens path for writing ("-" or empty: standard output).
func output(e *env, path string) (io.Writer, func() error, error) {
	if path == "" || path == "-" {
		return e.stdout, func() error { return nil }, nil
	}
	f, err := os.Create(path)
	if err != nil {
		return nil, nil, err
	}
	bw := bufio.NewWriter(f)
	return bw, func() error {
		if err := bw.Flush(); err != nil {
			f.Close()
			return err
		}
		return f.Close()
	}, nil
}

func f32s(v float32) string { return strconv.FormatFloat(float64(v), 'g', -1, 32) }

func writeRows(w io.Writer, header []string, x []float32, rows int) error {
	cw := csv.NewWriter(w)
	cw.Write(header)
	cols := len(header)
	rec := make([]string, cols)
	for r := 0; r < rows; r++ {
		for j := 0; j < cols; j++ {
			rec[j] = f32s(x[r*cols+j])
		}
		cw.Write(rec)
	}
	cw.Flush()
	return cw.Error()
}

func names(prefix string, n int) []string {
	s := make([]string, n)
	for i := range s {
		s[i] = prefix + strconv.Itoa(i)
	}
	return s
}

func cmdScore(e *env, args []string) error {
	fs := newFlags(e, "score", "-model MODEL -data FILE.csv [-out SCORES.csv]")
	model := fs.String("model", "", "autoencoder (reconstruction error) or VAE (negative ELBO) model file with a threshold (required)")
	var d dataFlags
	d.register(fs, true)
	out := fs.String("out", "-", "CSV file for the scores (- for standard output)")
	top := fs.Int("top", 3, "contributing features to list per row")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	l, err := loadModel(*model)
	if err != nil {
		return err
	}
	var (
		th      *anomaly.Threshold
		columns []string
		inputs  int
		score   func(x []float32, rows, top int) ([]anomaly.Score, error)
	)
	switch {
	case l.ae != nil:
		th, columns, inputs, score = l.ae.Threshold, l.ae.Columns, l.ae.Config().Inputs, l.ae.Score
	case l.vae != nil:
		th, columns, inputs, score = l.vae.Threshold, l.vae.Columns, l.vae.Config().Inputs, l.vae.Score
	default:
		return fmt.Errorf("score needs an autoencoder or VAE model; %s holds a %s", *model, l.file.Kind)
	}
	if th == nil {
		return fmt.Errorf("%s has no threshold (train it with -val > 0)", *model)
	}
	ds, err := d.loadFor(columns, inputs)
	if err != nil {
		return err
	}
	scores, err := score(ds.X, ds.Rows, *top)
	if err != nil {
		return err
	}
	w, closeOut, err := output(e, *out)
	if err != nil {
		return err
	}
	cw := csv.NewWriter(w)
	header := []string{"row", "score", "threshold", "anomaly"}
	for k := 1; k <= *top; k++ {
		header = append(header, fmt.Sprintf("feature%d", k), fmt.Sprintf("share%d", k))
	}
	cw.Write(header)
	flagged := 0
	for i, s := range scores {
		rec := []string{strconv.Itoa(i + 1), strconv.FormatFloat(s.Value, 'g', 8, 64), strconv.FormatFloat(s.Threshold, 'g', 8, 64), strconv.FormatBool(s.Anomaly)}
		for _, f := range s.Top {
			name := f.Name
			if name == "" {
				name = "c" + strconv.Itoa(f.Column)
			}
			rec = append(rec, name, strconv.FormatFloat(f.Share, 'f', 4, 64))
		}
		cw.Write(rec)
		if s.Anomaly {
			flagged++
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return err
	}
	if err := closeOut(); err != nil {
		return err
	}
	fmt.Fprintf(e.stderr, "scored %d rows: %d above the threshold %.6g (expected false-alarm rate %.2f%%)\n", len(scores), flagged, th.Value, 100*th.ExpectedFalseAlarm)
	fmt.Fprintln(e.stderr, ae.Caution)
	return nil
}

func cmdEncode(e *env, args []string) error {
	fs := newFlags(e, "encode", "-model MODEL -data FILE [-out CODES.csv]")
	model := fs.String("model", "", "autoencoder or VAE model file (required)")
	var d dataFlags
	d.register(fs, true)
	out := fs.String("out", "-", "CSV file for the codes (- for standard output)")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	l, err := loadModel(*model)
	if err != nil {
		return err
	}
	var codes []float32
	var ds *data.Dataset
	var width int
	switch {
	case l.ae != nil:
		width = l.ae.Config().Latent
		if ds, err = d.loadFor(l.ae.Columns, l.ae.Config().Inputs); err == nil {
			codes, err = l.ae.Encode(ds.X, ds.Rows)
		}
	case l.vae != nil:
		width = l.vae.Config().Latent
		if ds, err = d.loadFor(l.vae.Columns, l.vae.Config().Inputs); err == nil {
			codes, err = l.vae.Encode(ds.X, ds.Rows)
		}
	default:
		return fmt.Errorf("encode needs an autoencoder or VAE model; %s holds a %s", *model, l.file.Kind)
	}
	if err != nil {
		return err
	}
	w, closeOut, err := output(e, *out)
	if err != nil {
		return err
	}
	if err := writeRows(w, names("z", width), codes, ds.Rows); err != nil {
		return err
	}
	return closeOut()
}

// writeImagesOrCSV writes rows as a PNG grid when the path ends in .png
// and the model was trained on images, else as CSV.
func writeImagesOrCSV(e *env, path string, x []float32, rows int, image []int, columns []string, width int) error {
	if strings.EqualFold(filepath.Ext(path), ".png") {
		if len(image) != 3 {
			return usagef("a PNG grid needs a model trained on images; use a .csv output")
		}
		cols := 8
		if rows <= 12 {
			cols = rows
		}
		return report.ImageGrid(path, x, image[0], image[1], image[2], cols, 3)
	}
	header := columns
	if len(header) != width {
		header = names("c", width)
	}
	w, closeOut, err := output(e, path)
	if err != nil {
		return err
	}
	if err := writeRows(w, header, x, rows); err != nil {
		return err
	}
	return closeOut()
}

func cmdSample(e *env, args []string) error {
	fs := newFlags(e, "sample", "-model MODEL [-n N] [-seed S] [-out FILE.csv|FILE.png]")
	model := fs.String("model", "", "VAE or GAN model file (required)")
	n := fs.Int("n", 16, "number of samples")
	seed := fs.Uint64("seed", 1, "random seed: same seed, same samples")
	class := fs.Int("class", -1, "class to sample from a conditional GAN (-1: any)")
	out := fs.String("out", "-", "CSV file, or PNG grid for image models")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	if *n <= 0 || *n > 1_000_000 {
		return usagef("-n must be in 1..1000000")
	}
	l, err := loadModel(*model)
	if err != nil {
		return err
	}
	switch {
	case l.vae != nil:
		if *class != -1 {
			return usagef("-class applies to conditional GANs only")
		}
		x, err := l.vae.Sample(*n, *seed)
		if err != nil {
			return err
		}
		return writeImagesOrCSV(e, *out, x, *n, l.vae.Image, l.vae.Columns, l.vae.Config().Inputs)
	case l.gan != nil:
		x, err := l.gan.Generate(*n, *seed, *class)
		if err != nil {
			return err
		}
		return writeImagesOrCSV(e, *out, x, *n, l.gan.Image, l.gan.Columns, l.gan.Config().Outputs)
	}
	return fmt.Errorf("sample needs a VAE or GAN model; %s holds a %s", *model, l.file.Kind)
}

func cmdInterpolate(e *env, args []string) error {
	fs := newFlags(e, "interpolate", "-model MODEL -data FILE -from ROW -to ROW [-steps N] [-out FILE]")
	model := fs.String("model", "", "VAE model file (required)")
	var d dataFlags
	d.register(fs, true)
	from := fs.Int("from", 1, "first row (1-based)")
	to := fs.Int("to", 2, "last row (1-based)")
	steps := fs.Int("steps", 8, "points on the path, ends included")
	path := fs.String("path", "spherical", "linear or spherical")
	out := fs.String("out", "-", "CSV file, or PNG grid for image models")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	if *steps < 2 || *steps > 10000 {
		return usagef("-steps must be in 2..10000")
	}
	l, err := loadModel(*model)
	if err != nil {
		return err
	}
	if l.vae == nil {
		return fmt.Errorf("interpolate needs a VAE model; %s holds a %s", *model, l.file.Kind)
	}
	m := l.vae
	ds, err := d.loadFor(m.Columns, m.Config().Inputs)
	if err != nil {
		return err
	}
	if *from < 1 || *from > ds.Rows || *to < 1 || *to > ds.Rows {
		return usagef("-from and -to must be rows 1..%d", ds.Rows)
	}
	x, err := m.Interpolate(ds.Row(*from-1), ds.Row(*to-1), *steps, vae.Path(*path))
	if err != nil {
		return err
	}
	img := m.Image
	if img == nil {
		img = ds.Image
	}
	return writeImagesOrCSV(e, *out, x, *steps, img, m.Columns, m.Config().Inputs)
}

func cmdInspect(e *env, args []string) error {
	fs := newFlags(e, "inspect", "MODEL")
	if _, err := parse(e, fs, args, 1); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("inspect takes one model file")
	}
	path := fs.Arg(0)
	st, err := os.Stat(path)
	if err != nil {
		return err
	}
	l, err := loadModel(path)
	if err != nil {
		return err
	}
	w := e.stdout
	fmt.Fprintf(w, "file        %s (%d bytes, format version %d, checksum verified)\n", path, st.Size(), modelfile.Version)
	fmt.Fprintf(w, "kind        %s\n", l.file.Kind)
	var nets []*layers.MLP
	var params []*layers.Param
	switch {
	case l.ae != nil:
		nets, params = []*layers.MLP{l.ae.Encoder, l.ae.Decoder, l.ae.Head}, l.ae.Params()
		if th := l.ae.Threshold; th != nil {
			fmt.Fprintf(w, "threshold   %.6g (%s, expected false-alarm rate %.2f%%, %d calibration rows)\n", th.Value, th.Method, 100*th.ExpectedFalseAlarm, th.Rows)
		} else {
			fmt.Fprintln(w, "threshold   none")
		}
		if l.ae.Scaler != nil {
			fmt.Fprintf(w, "scaling     %s\n", l.ae.Scaler.Kind)
		}
	case l.vae != nil:
		nets, params = []*layers.MLP{l.vae.Encoder, l.vae.Decoder}, l.vae.Params()
		fmt.Fprintf(w, "likelihood  %s, latent %d\n", l.vae.Config().Likelihood, l.vae.Config().Latent)
		if th := l.vae.Threshold; th != nil {
			fmt.Fprintf(w, "threshold   %.6g on the negative ELBO (%s, expected false-alarm rate %.2f%%, %d calibration rows)\n", th.Value, th.Method, 100*th.ExpectedFalseAlarm, th.Rows)
		}
	case l.gan != nil:
		nets, params = []*layers.MLP{l.gan.Generator, l.gan.Discriminator}, l.gan.Params()
		c := l.gan.Config()
		fmt.Fprintf(w, "objective   %s critic, %s generator loss, noise %d, classes %d, pack %d\n", c.Critic, c.Loss, c.Noise, c.Classes, c.Pack)
	}
	for _, n := range nets {
		if n == nil {
			continue
		}
		var parts []string
		for _, d := range n.Layers {
			parts = append(parts, fmt.Sprintf("%d->%d %s", d.In, d.Out, d.Act))
		}
		fmt.Fprintf(w, "%-11s %s\n", n.Name, strings.Join(parts, ", "))
	}
	total := 0
	for _, p := range params {
		total += p.Len()
	}
	fmt.Fprintf(w, "parameters  %d in %d tensors (%s)\n", total, len(params), params[0].Precision())
	if p := l.prov; p != nil {
		fmt.Fprintf(w, "data        %s, %d rows, fingerprint %s\n", p.DataFile, p.DataRows, p.DataFingerprint)
		if n, ok := p.Training["epochs_run"].(float64); ok {
			line := fmt.Sprintf("%d epochs, final training loss %.6g", int(n), p.Training["final_train_loss"])
			if v, ok := p.Training["final_validation_loss"].(float64); ok {
				line += fmt.Sprintf(", validation loss %.6g on %v rows", v, p.Training["validation_rows"])
			}
			line += fmt.Sprintf(", best epoch %v", p.Training["best_epoch"])
			if se, _ := p.Training["stopped_early"].(bool); se {
				line += ", stopped early"
			}
			fmt.Fprintf(w, "summary     %s\n", line)
		}
		if a, ok := p.Training["args"].([]any); ok {
			var s []string
			for _, v := range a {
				s = append(s, fmt.Sprint(v))
			}
			fmt.Fprintf(w, "training    %s\n", strings.Join(s, " "))
		}
	}
	var meta map[string]any
	if json.Unmarshal(l.file.Meta, &meta) == nil {
		keys := make([]string, 0, len(meta))
		for k := range meta {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		fmt.Fprintf(w, "metadata    %s\n", strings.Join(keys, ", "))
	}
	return nil
}
