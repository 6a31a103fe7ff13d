package main

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strconv"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
)

// firstRows returns up to n rows of d.
func firstRows(d *data.Dataset, n int) ([]float32, int) {
	n = min(n, d.Rows)
	return d.X[:n*d.Cols], n
}

// writeTrainReport writes the training report: the loss curves, then a
// figure for each thing the model can do (scores of the validation rows,
// codes, reconstructions, samples).
func writeTrainReport(dir string, m model.Model, s train.Settings, rec runRecord, h *train.History, full, val *data.Dataset) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	pg := report.Page{Title: fmt.Sprintf("quern %s training report", m.Kind())}
	for _, st := range reportSettings(s, rec) {
		pg.Settings = append(pg.Settings, st)
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
	img := full.Image
	if sc, ok := m.(model.Scorer); ok {
		pg.Caution = anomaly.Caution
		if th := sc.Calibrated(); val != nil && th != nil {
			s, err := sc.RowScores(val.X, val.Rows)
			if err != nil {
				return err
			}
			if err := add("scores.png", fmt.Sprintf("Scores of the validation rows; the dashed line is the threshold (%s, expected false-alarm rate %.2f%%).", th.Method, 100*th.ExpectedFalseAlarm),
				report.ScoreHistogram(filepath.Join(dir, "scores.png"), s, th.Value, nil)); err != nil {
				return err
			}
		}
	}
	if enc, ok := m.(model.Encoder); ok {
		codes, err := enc.Encode(sample, n)
		if err != nil {
			return err
		}
		if err := add("latent.png", "First two code dimensions of the training rows.",
			report.LatentScatter(filepath.Join(dir, "latent.png"), report.FirstTwo(codes, n, enc.CodeWidth()), labels, nil)); err != nil {
			return err
		}
	}
	smp, canSample := m.(model.Sampler)
	if canSample && img != nil {
		s, err := smp.Sample(32, rec.SplitSeed)
		if err != nil {
			return err
		}
		if err := add("samples.png", "Samples drawn from the model.",
			report.ImageGrid(filepath.Join(dir, "samples.png"), s, img[0], img[1], img[2], 8, 3)); err != nil {
			return err
		}
	}
	if r, ok := m.(model.Reconstructor); ok && img != nil {
		k := min(n, 16)
		out, err := r.Reconstruct(sample[:k*full.Cols], k)
		if err != nil {
			return err
		}
		both := append(append([]float32(nil), sample[:k*full.Cols]...), out...)
		if err := add("reconstructions.png", "Top: inputs; bottom: reconstructions.",
			report.ImageGrid(filepath.Join(dir, "reconstructions.png"), both, img[0], img[1], img[2], k, 3)); err != nil {
			return err
		}
	}
	if canSample && img == nil && n >= 2 {
		s, err := smp.Sample(n, rec.SplitSeed)
		if err != nil {
			return err
		}
		both := append(report.FirstTwo(sample, n, full.Cols), report.FirstTwo(s, n, full.Cols)...)
		lab := make([]int, 2*n)
		for i := n; i < 2*n; i++ {
			lab[i] = 1
		}
		if err := add("samples.png", "First two columns: real rows and generated rows.",
			report.LatentScatter(filepath.Join(dir, "samples.png"), both, lab, []string{"real", "generated"})); err != nil {
			return err
		}
		if fd, err := gan.FrechetRows(sample, n, s, n, full.Cols); err == nil {
			pg.Paragraphs = append(pg.Paragraphs, fmt.Sprintf("Fréchet distance between Gaussians fitted to %d real and %d generated rows (raw columns): %.4g.", n, n, fd))
		}
	}
	return pg.Write(dir)
}

// reportSettings lists the run's settings for the report page.
func reportSettings(s train.Settings, rec runRecord) []report.Setting {
	st := []report.Setting{
		{Name: "data", Value: rec.Data.Path},
		{Name: "validation fraction", Value: strconv.FormatFloat(rec.Validation, 'g', -1, 64)},
		{Name: "seed (split)", Value: strconv.FormatUint(rec.SplitSeed, 10)},
		{Name: "epochs", Value: strconv.Itoa(s.Epochs)},
		{Name: "batch size", Value: strconv.Itoa(s.BatchSize)},
		{Name: "learning rate", Value: strconv.FormatFloat(s.Optimizer.Rate, 'g', -1, 64)},
	}
	if s.Patience > 0 {
		st = append(st, report.Setting{Name: "patience", Value: strconv.Itoa(s.Patience)})
	}
	if b, err := json.Marshal(s.Objective); err == nil && string(b) != "{}" {
		st = append(st, report.Setting{Name: "objective", Value: string(b)})
	}
	return st
}
