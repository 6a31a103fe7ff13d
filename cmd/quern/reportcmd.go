package main

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/quernlab/quern/ae"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
)

// firstRows returns up to n rows of d.
func firstRows(d *data.Dataset, n int) ([]float32, int) {
	n = min(n, d.Rows)
	return d.X[:n*d.Cols], n
}

// scatter2 keeps the first two columns of rows of width w.
func scatter2(x []float32, rows, w int) []float32 {
	out := make([]float32, 0, 2*rows)
	for r := 0; r < rows; r++ {
		a, b := x[r*w], float32(0)
		if w > 1 {
			b = x[r*w+1]
		}
		out = append(out, a, b)
	}
	return out
}

func writeTrainReport(o trainOpts, model trainable, h *train.History, full, val *data.Dataset) error {
	dir := o.report
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	pg := report.Page{Title: fmt.Sprintf("quern %s training report", o.kind)}
	for _, a := range o.args() {
		k, v, _ := strings.Cut(strings.TrimPrefix(a, "-"), "=")
		pg.Settings = append(pg.Settings, report.Setting{Name: k, Value: v})
	}
	add := func(file, caption string, err error) error {
		if err != nil {
			return err
		}
		pg.Figures = append(pg.Figures, report.Figure{File: file, Caption: caption})
		return nil
	}
	if err := add("loss.png", "Training metrics and validation loss per epoch; the dot marks the best epoch.",
		report.LossCurves(filepath.Join(dir, "loss.png"), h, nil)); err != nil {
		return err
	}
	sample, n := firstRows(full, 2000)
	var labels []int
	if full.Labels != nil {
		labels = full.Labels[:n]
	}
	switch m := model.(type) {
	case *ae.Model:
		pg.Caution = ae.Caution
		if val != nil && m.Threshold != nil {
			s, err := m.RowErrors(val.X, val.Rows)
			if err != nil {
				return err
			}
			if err := add("scores.png", fmt.Sprintf("Scores of the validation rows; the dashed line is the threshold (%s, expected false-alarm rate %.2f%%).", m.Threshold.Method, 100*m.Threshold.ExpectedFalseAlarm),
				report.ScoreHistogram(filepath.Join(dir, "scores.png"), s, m.Threshold.Value, nil)); err != nil {
				return err
			}
		}
		codes, err := m.Encode(sample, n)
		if err != nil {
			return err
		}
		if err := add("latent.png", "First two code dimensions of the training rows.",
			report.LatentScatter(filepath.Join(dir, "latent.png"), scatter2(codes, n, m.Config().Latent), labels, nil)); err != nil {
			return err
		}
		if img := full.Image; img != nil {
			k := min(n, 16)
			rec, err := m.Reconstruct(sample[:k*full.Cols], k)
			if err != nil {
				return err
			}
			both := append(append([]float32(nil), sample[:k*full.Cols]...), rec...)
			if err := add("reconstructions.png", "Top: inputs; bottom: reconstructions.",
				report.ImageGrid(filepath.Join(dir, "reconstructions.png"), both, img[0], img[1], img[2], k, 3)); err != nil {
				return err
			}
		}
	case *vae.Model:
		codes, err := m.Encode(sample, n)
		if err != nil {
			return err
		}
		if err := add("latent.png", "First two latent dimensions (posterior means) of the training rows.",
			report.LatentScatter(filepath.Join(dir, "latent.png"), scatter2(codes, n, m.Config().Latent), labels, nil)); err != nil {
			return err
		}
		if img := full.Image; img != nil {
			s, err := m.Sample(32, o.seed)
			if err != nil {
				return err
			}
			if err := add("samples.png", "Samples from the prior (decoder means).",
				report.ImageGrid(filepath.Join(dir, "samples.png"), s, img[0], img[1], img[2], 8, 3)); err != nil {
				return err
			}
			k := min(n, 16)
			rec, err := m.Reconstruct(sample[:k*full.Cols], k)
			if err != nil {
				return err
			}
			both := append(append([]float32(nil), sample[:k*full.Cols]...), rec...)
			if err := add("reconstructions.png", "Top: inputs; bottom: reconstructions.",
				report.ImageGrid(filepath.Join(dir, "reconstructions.png"), both, img[0], img[1], img[2], k, 3)); err != nil {
				return err
			}
		}
	case *gan.Model:
		s, err := m.Generate(n, o.seed, -1)
		if err != nil {
			return err
		}
		if img := full.Image; img != nil {
			if err := add("samples.png", "Generated samples.",
				report.ImageGrid(filepath.Join(dir, "samples.png"), s[:min(n, 32)*full.Cols], img[0], img[1], img[2], 8, 3)); err != nil {
				return err
			}
		} else {
			both := append(scatter2(sample, n, full.Cols), scatter2(s, n, full.Cols)...)
			lab := make([]int, 2*n)
			for i := n; i < 2*n; i++ {
				lab[i] = 1
			}
			if err := add("samples.png", "First two columns: real rows and generated rows.",
				report.LatentScatter(filepath.Join(dir, "samples.png"), both, lab, []string{"real", "generated"})); err != nil {
				return err
			}
		}
		fd, err := gan.FrechetRows(sample, n, s, n, full.Cols)
		if err == nil {
			pg.Paragraphs = append(pg.Paragraphs, fmt.Sprintf("Fréchet distance between Gaussians fitted to %d real and %d generated rows (raw columns): %.4g.", n, n, fd))
		}
	}

	return pg.Write(dir)
}
