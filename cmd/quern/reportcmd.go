package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"time"

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

// fidWatch measures, after each epoch, the Fréchet distance between
// Gaussians fitted to a fixed sample of real rows and as many rows drawn
// from the model, for the report's curve over training.
type fidWatch struct {
	real  []float32
	rows  int
	cols  int
	seed  uint64
	value []float64
}

// fidCols bounds the width whose covariance is worth an epoch's wait
// (the distance needs a symmetric square root of a cols x cols matrix).
const fidCols = 256

func newFIDWatch(m model.Model, full *data.Dataset, seed uint64) *fidWatch {
	if _, ok := m.(model.Sampler); !ok || full.Cols > fidCols {
		return nil
	}
	x, n := firstRows(full, 1000)
	if n < 3 {
		return nil
	}
	return &fidWatch{real: x, rows: n, cols: full.Cols, seed: seed}
}

// after is called at the end of each epoch with the model as trained so
// far.
func (f *fidWatch) after(m model.Model) {
	if f == nil {
		return
	}
	v := math.NaN()
	if s, err := m.(model.Sampler).Sample(f.rows, f.seed); err == nil {
		if d, err := gan.FrechetRows(f.real, f.rows, s, f.rows, f.cols); err == nil {
			v = d
		}
	}
	f.value = append(f.value, v)
}

// runInfo is what the report says of the run beside its figures.
type runInfo struct {
	started time.Time
	fid     *fidWatch
	th      *anomaly.Threshold
}

// writeTrainReport writes the training report: the training curves, then
// a figure for each thing the model can do (scores of the validation
// rows, codes, reconstructions, samples), the run's numbers and settings.
func writeTrainReport(dir string, m model.Model, s train.Settings, rec runRecord, h *train.History, full, val *data.Dataset, info runInfo) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	pg := report.Page{Title: fmt.Sprintf("quern training report: %s", kindPhrase(m.Kind())),
		Generated: time.Now().UTC().Format("2006-01-02 15:04 UTC"), Version: version(),
		RunTime: shortDuration(time.Since(info.started))}
	pg.Settings = reportSettings(s, rec)
	pg.Summary = runSummary(m, h, full, val, info.th)
	add := func(file, caption string, err error) error {
		if err != nil {
			return err
		}
		pg.Figures = append(pg.Figures, report.Figure{File: file, Caption: caption})
		return nil
	}
	_, isGAN := m.(model.Sampler)
	_, hasCodes := m.(model.Encoder)
	isGAN = isGAN && !hasCodes
	// no best epoch without validation rows (a GAN's lowest loss is not
	// its best; a run without them has a fixed length)
	opt := report.CurveOptions{NoBest: isGAN || val == nil}
	caption := "Training metrics per epoch, solid, and on the validation rows, dashed; the dotted line marks the best epoch (lowest validation loss)."
	if val == nil {
		caption = "Training metrics per epoch (no validation rows: the run's length was set in advance"
		if rec.CrossFit != nil {
			caption += ", from where the cross-fit folds' models were best"
		}
		caption += ")."
	}
	if isGAN {
		caption = "Per epoch: the discriminator's and the generator's losses, the discriminator's mean output on real and on generated rows, and the other training figures; dashed lines are the validation rows."
	}
	if info.fid != nil && len(info.fid.value) == len(h.Epochs) {
		opt.Extra = append(opt.Extra, report.Series{Name: "Fréchet distance", Title: "Fréchet distance, real and generated rows", Y: info.fid.value})
		caption += fmt.Sprintf(" The Fréchet distance compares Gaussians fitted to %d real rows and as many generated rows after each epoch (lower: closer).", info.fid.rows)
	}
	if err := add("curves.png", caption, report.LossCurves(filepath.Join(dir, "curves.png"), h, opt)); err != nil {
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
		th := sc.Calibrated()
		rows, whose := val, "validation rows"
		if val == nil && th != nil && th.CrossFitted {
			// the threshold came from the rows' cross-fitted scores; the
			// final model's own scores of them are in-sample
			rows, whose = full, "training rows (the final model's own scores; the threshold was set on their cross-fitted scores)"
		}
		if rows != nil && th != nil {
			var s []float64
			n := rows.Rows
			if cf := rec.CrossFit; whose != "validation rows" && cf != nil && len(cf.heldOut) == full.Rows {
				s, whose = cf.heldOut, "training rows, each from the fold model that had not seen it (the scores the threshold was set on)"
			} else {
				var err error
				if s, err = sc.RowScores(rows.X, rows.Rows); err != nil {
					return err
				}
			}
			what := "score"
			if n, ok := m.(model.ScoreNamer); ok {
				what = n.ScoreName()
			}
			if err := add("scores.png", fmt.Sprintf("Scores of the %d %s; the dashed line is the threshold %.4g (method %s, expected false-alarm rate %.2f%%%s).", n, whose, th.Value, th.Method, 100*th.ExpectedFalseAlarm, boundPhrase(*th)),
				report.ScoreHistogram(filepath.Join(dir, "scores.png"), s, th.Value, nil, what)); err != nil {
				return err
			}
		}
	}
	if enc, ok := m.(model.Encoder); ok && n >= 2 {
		codes, err := enc.Encode(sample, n)
		if err != nil {
			return err
		}
		w := enc.CodeWidth()
		caption := fmt.Sprintf("Codes of %d rows of the data (a shuffled sample of the training rows when a validation split was made)", n)
		if w > 2 {
			caption += fmt.Sprintf(": on top, their projection on the first two principal components of all %d dimensions; below, each pair of the first %d dimensions", w, min(w, 4))
		}
		if labels != nil {
			caption += "; colour and marker show the label"
		}
		if err := add("latent.png", caption+".", report.LatentMap(filepath.Join(dir, "latent.png"), codes, n, w, labels, classNames(full))); err != nil {
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
	if canSample && img == nil && n >= 3 {
		s, err := smp.Sample(n, rec.SplitSeed)
		if err != nil {
			return err
		}
		// real and generated rows in one projection: the axes are the
		// real rows' principal components, so the two clouds compare
		both := append(append([]float32(nil), sample...), s...)
		lab := make([]int, 2*n)
		for i := n; i < 2*n; i++ {
			lab[i] = 1
		}
		if err := add("samples.png", fmt.Sprintf("%d real rows and %d generated rows, projected together on the first two principal components of all %d columns (standardised), and each pair of the first columns in raw units.", n, n, full.Cols),
			report.RowMap(filepath.Join(dir, "samples.png"), both, 2*n, full.Cols, lab, []string{"real", "generated"}, full.Columns)); err != nil {
			return err
		}
		if fd, err := gan.FrechetRows(sample, n, s, n, full.Cols); err == nil {
			pg.Summary = append(pg.Summary, report.Setting{Name: fmt.Sprintf("Fréchet distance, %d real and %d generated rows (raw columns)", n, n), Value: fmt.Sprintf("%.4g", fd)})
		}
	}
	return pg.Write(dir)
}

// classNames names the labels; the loaders keep no names, so they are
// "class 0", "class 1" and so on.
func classNames(*data.Dataset) []string { return nil }

// runSummary lists the run's numbers for the report.
func runSummary(m model.Model, h *train.History, full, val *data.Dataset, th *anomaly.Threshold) []report.Setting {
	n := len(h.Epochs)
	out := []report.Setting{{Name: "training rows", Value: strconv.Itoa(full.Rows)}, {Name: "epochs run", Value: strconv.Itoa(n)}}
	if val != nil {
		out[0] = report.Setting{Name: "rows (training + validation)", Value: fmt.Sprintf("%d (%d + %d)", full.Rows, full.Rows-val.Rows, val.Rows)}
	}
	last := h.Epochs[n-1]
	for i, mt := range last.Train {
		if i > 0 && mt.Value == last.Train[0].Value {
			continue // a term that is the whole loss
		}
		out = append(out, report.Setting{Name: "final training " + mt.Name, Value: fmt.Sprintf("%.6g", mt.Value)})
	}
	for i, mt := range last.Validation {
		if i > 0 && mt.Value == last.Validation[0].Value {
			continue
		}
		out = append(out, report.Setting{Name: "final validation " + mt.Name, Value: fmt.Sprintf("%.6g", mt.Value)})
	}
	if _, ok := m.(model.Encoder); ok && h.BestEpoch > 0 && val != nil {
		out = append(out, report.Setting{Name: "best epoch", Value: fmt.Sprintf("%d (loss %.6g)", h.BestEpoch, h.BestLoss)})
	}
	if h.StoppedEarly {
		out = append(out, report.Setting{Name: "stopped early", Value: "yes"})
	}
	if th != nil {
		how := "calibration rows"
		if th.CrossFitted {
			how = "cross-fitted calibration rows"
		}
		out = append(out, report.Setting{Name: "threshold", Value: fmt.Sprintf("%.6g (%s, expected false-alarm rate %.2f%%%s, on %d %s)", th.Value, th.Method, 100*th.ExpectedFalseAlarm, boundPhrase(*th), th.Rows, how)})
	}
	for _, w := range h.Warnings {
		out = append(out, report.Setting{Name: fmt.Sprintf("warning at step %d", w.Step), Value: w.Message})
	}
	return out
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
		{Name: "threshold method", Value: fmt.Sprintf("%s (target false-alarm rate %g)", rec.Threshold, rec.FalseAlarm)},
	}
	if rec.Score != "" {
		st = append(st, report.Setting{Name: "score", Value: rec.Score})
	}
	if cf := rec.CrossFit; cf != nil {
		st = append(st, report.Setting{Name: "cross-fitting", Value: fmt.Sprintf("%d folds, the folds' mean best length %d steps", cf.Folds, cf.Steps)})
	}
	for _, c := range rec.Chosen {
		st = append(st, report.Setting{Name: "chosen", Value: c})
	}
	if s.Patience > 0 {
		st = append(st, report.Setting{Name: "patience", Value: strconv.Itoa(s.Patience)})
	}
	if o := s.Optimizer; o.WeightDecay > 0 || o.ClipNorm > 0 {
		st = append(st, report.Setting{Name: "optimiser", Value: fmt.Sprintf("Adam, beta1 %g, beta2 %g, weight decay %g, gradient clip %g", o.Beta1, o.Beta2, o.WeightDecay, o.ClipNorm)})
	}
	if b, err := json.Marshal(s.Objective); err == nil && string(b) != "{}" {
		st = append(st, report.Setting{Name: "objective", Value: string(b)})
	}
	return st
}
