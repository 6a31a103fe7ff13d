package main

import (
	"fmt"
	"io"
	"strings"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/fidelity"
	"github.com/quernlab/quern/model"
)

// cmdFidelity measures a generative model's samples against held-out
// real rows: per column, for pairs of columns, and as copies of the
// training rows, beside a column-by-column baseline.
func cmdFidelity(e *env, args []string) error {
	fs := newFlags(e, "fidelity", "-model MODEL -train FILE -holdout FILE [-n N] [-seed S]")
	modelPath := fs.String("model", "", "generative model file: a VAE or a GAN (required)")
	trainPath := fs.String("train", "", "the rows the model trained on, for the copy check and the baseline: a CSV file or idx file (required)")
	holdPath := fs.String("holdout", "", "real rows the model never saw, like the training rows: a CSV file or idx file (required)")
	n := fs.Int("n", 0, "number of samples to draw (default: as many as the held-out rows)")
	seed := fs.Uint64("seed", 1, "random seed of the samples and the baseline: same seed, same figures")
	quiet := fs.Bool("quiet", false, "no progress output")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	for flag, v := range map[string]string{"-model": *modelPath, "-train": *trainPath, "-holdout": *holdPath} {
		if v == "" {
			return usagef("%s is required", flag)
		}
	}
	if *n < 0 || *n > 1_000_000 {
		return usagef("-n must be in 1..1000000")
	}
	st := newStatus(e.stderr, *quiet)
	defer st.end()
	st.begin("open", nil)
	l, smp, err := openAs[model.Sampler]("fidelity", "a generative model (a VAE or a GAN)", map[string]string{"-model": *modelPath, "-train": *trainPath, "-holdout": *holdPath})
	if err != nil {
		return err
	}
	if l.model.Schema().Image != nil {
		return usagef("fidelity measures tables; for images, the Fréchet distance of a report (-report) says how like real images samples are")
	}
	sets := map[string]*data.Dataset{}
	for _, f := range []struct{ flag, path string }{{"-train", *trainPath}, {"-holdout", *holdPath}} {
		d := dataFlags{path: f.path, phase: "load " + f.flag[1:]}
		ds, err := l.loadRows(&d, st)
		if err != nil {
			return err
		}
		if ds.Rows < 2 {
			return fmt.Errorf("%s %s: %d rows, want at least 2", f.flag, f.path, ds.Rows)
		}
		sets[f.flag] = ds
	}
	rows := *n
	if rows == 0 {
		rows = sets["-holdout"].Rows
	}
	st.begin("sample", func() string { return fmt.Sprintf("%d rows", rows) })
	x, err := smp.Sample(rows, *seed)
	if err != nil {
		return err
	}
	syn, err := data.New(x, rows, l.model.Width())
	if err != nil {
		return fmt.Errorf("the model's samples: %w", err)
	}
	st.begin("compare", nil)
	r, err := fidelity.Compare(sets["-train"], sets["-holdout"], syn, l.model.Schema().Encoding, *seed)
	if err != nil {
		return err
	}
	st.clear()
	writeFidelity(e.stdout, r)
	st.done()
	return nil
}

// writeFidelity prints a report: a table of columns, then the pairs and
// the copy check, each beside the baseline.
func writeFidelity(w io.Writer, r *fidelity.Report) {
	width := len("column")
	for _, c := range r.Synthetic.Columns {
		width = max(width, len(c.Name))
	}
	fmt.Fprintf(w, "%d samples against %d held-out rows; baseline: %d rows drawn column by column from the %d training rows\n",
		r.SyntheticRows, r.HoldoutRows, r.SyntheticRows, r.TrainRows)
	fmt.Fprintf(w, "%-*s  %-11s  %-4s  %9s  %9s\n", width, "column", "type", "stat", "samples", "baseline")
	worse := 0
	for i, c := range r.Synthetic.Columns {
		b := r.Baseline.Columns[i]
		fmt.Fprintf(w, "%-*s  %-11s  %-4s  %9.4f  %9.4f\n", width, c.Name, c.Type, c.Statistic, c.Value, b.Value)
		if c.Value > b.Value {
			worse++
		}
	}
	fmt.Fprintf(w, "%-*s  %-11s  %-4s  %9.4f  %9.4f\n", width, "correlations", "pairs", "gap", r.Synthetic.CorrelationGap, r.Baseline.CorrelationGap)
	fmt.Fprintf(w, "%-*s  %-11s  %-4s  %9.4f  %9.4f\n", width, "all columns", "Gaussian", "FD", r.Synthetic.Frechet, r.Baseline.Frechet)
	s, b := r.Synthetic.Nearest, r.Baseline.Nearest
	fmt.Fprintf(w, "nearest training row: median distance %.3g for samples, %.3g for the baseline, %.3g for held-out rows; nearer than 95%% of held-out rows: %.1f%% of samples, %.1f%% of the baseline (about 5%% is like real rows); copies of training rows: %d of the %d samples measured\n",
		s.Median, b.Median, s.Holdout, 100*s.Closer, 100*b.Closer, s.Copies, s.Measured)
	var notes []string
	if worse > 0 {
		notes = append(notes, fmt.Sprintf("%s fit worse than the baseline's", plural(worse, "column")))
	}
	if r.Synthetic.CorrelationGap >= r.Baseline.CorrelationGap {
		notes = append(notes, "the samples keep the relations between columns no better than independent columns do")
	}
	if s.Closer > 0.1 || float64(s.Copies) > 0.01*float64(s.Measured) {
		notes = append(notes, "samples sit nearer the training rows than real rows do: the model may be copying them")
	}
	if len(notes) == 0 {
		notes = append(notes, "every column fits at least as well as the baseline, the relations better, and no copying shows")
	}
	fmt.Fprintf(w, "summary: %s (KS: Kolmogorov-Smirnov statistic; TV: total variation distance; gap: mean absolute difference of the correlations; FD: Fréchet distance of Gaussians fitted to the standardised columns; 0 is a perfect match)\n", strings.Join(notes, "; "))
}
