package train

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
)

// ErrNonFinite is wrapped by every *NonFiniteError.
var ErrNonFinite = engine.ErrNonFinite

// ErrConfig is wrapped by configuration errors.
var ErrConfig = errors.New("train: invalid configuration")

// NonFiniteError reports a NaN or infinite loss or gradient with the place
// it appeared. Steps count from 1 within an epoch; epochs count from 1.
type NonFiniteError struct {
	Epoch, Step int
	Err         error
}

func (e *NonFiniteError) Error() string {
	return fmt.Sprintf("train: epoch %d step %d: %v", e.Epoch, e.Step, e.Err)
}

func (e *NonFiniteError) Unwrap() error { return e.Err }

// Metric is one named figure of a step or an evaluation. The first metric a
// Trainee reports is its loss.
type Metric struct {
	Name  string
	Value float64
}

// Batch is a mini-batch handed to a Trainee: Rows rows of Cols values in X
// (row-major) and, when the dataset has labels, one label per row.
// The slices are reused between steps.
type Batch struct {
	Rows, Cols int
	X          []float32
	Labels     []int
}

// Trainee is a model the loop can train. ae, vae and gan models implement
// it.
type Trainee interface {
	// Params lists every parameter, for snapshots of the best weights.
	Params() []*layers.Param
	// Step trains on one batch and returns its metrics, loss first. The
	// returned slice may be reused by the next call.
	Step(ctx context.Context, b Batch) ([]Metric, error)
	// Evaluate returns metrics on a whole dataset, loss first, without
	// training.
	Evaluate(d *data.Dataset) ([]Metric, error)
}

// Progress is what the loop reports to Config.OnStep and Config.OnEpoch.
type Progress struct {
	Epoch, Epochs int // 1-based epoch and the configured total
	Step, Steps   int // 1-based step within the epoch and steps per epoch
	Metrics       []Metric
	// Validation holds the epoch's validation metrics (end of epoch only;
	// nil without a validation set).
	Validation    []Metric
	SamplesPerSec float64
	Elapsed       time.Duration
	// Remaining estimates the time left from the pace so far.
	Remaining time.Duration
	EpochEnd  bool
}

// Config drives Run. Zero fields mean: 10 epochs, batches of 64, shuffled,
// no early stopping, no callbacks.
type Config struct {
	Epochs    int
	BatchSize int
	// Patience stops training after this many epochs without a validation
	// loss improvement of more than MinDelta (0 disables early stopping;
	// it needs a validation set).
	Patience int
	MinDelta float64
	// KeepLast keeps the final weights after early stopping instead of
	// restoring the best epoch's weights.
	KeepLast bool
	// OnStep is called after every step (may be nil).
	OnStep func(Progress)
	// OnEpoch is called after every epoch, after validation; an error
	// stops training and is returned (a checkpoint writer uses this).
	OnEpoch func(Progress, *History) error
	// Start resumes from a history (a checkpoint's), continuing at epoch
	// len(Start.Epochs)+1. The caller restores weights, optimiser state and
	// the generator's state. The best epoch's weights are not part of a
	// history: with early stopping, if the best epoch came before the
	// resume and no later epoch beats it, the weights at the resume stand
	// in for them.
	Start *History
}

// EpochRecord is one epoch's averages.
type EpochRecord struct {
	Train      []Metric `json:"train"`
	Validation []Metric `json:"validation,omitempty"`
}

// History is the record of a run: per-epoch metrics, the best epoch by
// validation loss (or by training loss without validation) and whether
// training stopped early. It marshals as JSON.
type History struct {
	Epochs       []EpochRecord `json:"epochs"`
	BestEpoch    int           `json:"best_epoch"` // 1-based; 0 before any epoch
	BestLoss     float64       `json:"best_loss"`
	StoppedEarly bool          `json:"stopped_early"`
	Restored     bool          `json:"restored_best"`
	sinceBest    int
}

// Loss returns the training and validation loss of epoch e (1-based); the
// validation loss is NaN without a validation set.
func (h *History) Loss(e int) (trainLoss, valLoss float64) {
	r := h.Epochs[e-1]
	valLoss = math.NaN()
	if len(r.Validation) > 0 {
		valLoss = r.Validation[0].Value
	}
	return r.Train[0].Value, valLoss
}

// Run trains t on trainSet for cfg.Epochs epochs of shuffled mini-batches
// drawn from rng, evaluates valSet (may be nil) after each epoch, stops
// early when asked, and returns the history. Cancelling ctx stops between
// steps with ctx's error. A non-finite loss is a *NonFiniteError.
func Run(ctx context.Context, t Trainee, trainSet, valSet *data.Dataset, cfg Config, rng *rand.Rand) (*History, error) {
	if cfg.Epochs == 0 {
		cfg.Epochs = 10
	}
	if cfg.BatchSize == 0 {
		cfg.BatchSize = 64
	}
	if cfg.Epochs < 0 || cfg.BatchSize < 0 || cfg.Patience < 0 || cfg.MinDelta < 0 {
		return nil, fmt.Errorf("%w: epochs %d, batch %d, patience %d, min delta %v", ErrConfig, cfg.Epochs, cfg.BatchSize, cfg.Patience, cfg.MinDelta)
	}
	if trainSet == nil || trainSet.Rows == 0 {
		return nil, fmt.Errorf("%w: no training rows", ErrConfig)
	}
	if valSet != nil && valSet.Cols != trainSet.Cols {
		return nil, fmt.Errorf("%w: validation has %d columns, training %d", ErrConfig, valSet.Cols, trainSet.Cols)
	}
	if cfg.Patience > 0 && valSet == nil {
		return nil, fmt.Errorf("%w: early stopping needs a validation set", ErrConfig)
	}
	batches, err := data.NewBatches(trainSet, data.BatchConfig{Size: cfg.BatchSize}, rng)
	if err != nil {
		return nil, err
	}
	h := &History{}
	if cfg.Start != nil {
		cp := *cfg.Start
		cp.Epochs = append([]EpochRecord(nil), cfg.Start.Epochs...)
		h = &cp
		h.sinceBest = len(h.Epochs) - h.BestEpoch
	}
	params := t.Params()
	var best [][]float64
	if h.BestEpoch > 0 && cfg.Patience > 0 && !cfg.KeepLast {
		// after a resume the best weights are not known; the current ones
		// stand in until an epoch improves on the recorded best.
		best = snapshot(params)
	}
	b := Batch{Cols: trainSet.Cols, X: make([]float32, cfg.BatchSize*trainSet.Cols)}
	if trainSet.Labels != nil {
		b.Labels = make([]int, cfg.BatchSize)
	}
	start := time.Now()
	samples := 0
	totalSteps := cfg.Epochs * batches.Len()
	doneSteps := len(h.Epochs) * batches.Len()
	for epoch := len(h.Epochs) + 1; epoch <= cfg.Epochs; epoch++ {
		batches.Shuffle()
		var sums []Metric
		for i := 0; i < batches.Len(); i++ {
			if err := ctx.Err(); err != nil {
				return h, err
			}
			b.Rows = batches.Rows(i)
			var lab []int
			if b.Labels != nil {
				lab = b.Labels[:b.Rows]
			}
			batches.Gather(i, b.X[:b.Rows*b.Cols], lab)
			bb := b
			bb.X = b.X[:b.Rows*b.Cols]
			bb.Labels = lab
			ms, err := t.Step(ctx, bb)
			if err != nil {
				if errors.Is(err, engine.ErrNonFinite) {
					return h, &NonFiniteError{Epoch: epoch, Step: i + 1, Err: err}
				}
				if ctx.Err() != nil {
					return h, ctx.Err()
				}
				return h, fmt.Errorf("train: epoch %d step %d: %w", epoch, i+1, err)
			}
			for _, m := range ms {
				if math.IsNaN(m.Value) || math.IsInf(m.Value, 0) {
					return h, &NonFiniteError{Epoch: epoch, Step: i + 1, Err: fmt.Errorf("%s is %v: %w", m.Name, m.Value, engine.ErrNonFinite)}
				}
			}
			if sums == nil {
				sums = make([]Metric, len(ms))
				for k, m := range ms {
					sums[k].Name = m.Name
				}
			}
			for k, m := range ms {
				if k < len(sums) {
					sums[k].Value += m.Value * float64(b.Rows)
				}
			}
			samples += b.Rows
			doneSteps++
			if cfg.OnStep != nil {
				cfg.OnStep(progress(epoch, cfg.Epochs, i+1, batches.Len(), ms, nil, samples, start, doneSteps, totalSteps, false))
			}
		}
		for k := range sums {
			sums[k].Value /= float64(trainSet.Rows)
		}
		rec := EpochRecord{Train: sums}
		if valSet != nil {
			vm, err := t.Evaluate(valSet)
			if err != nil {
				if errors.Is(err, engine.ErrNonFinite) {
					return h, &NonFiniteError{Epoch: epoch, Step: batches.Len(), Err: fmt.Errorf("validation: %w", err)}
				}
				return h, fmt.Errorf("train: epoch %d validation: %w", epoch, err)
			}
			rec.Validation = append([]Metric(nil), vm...)
		}
		h.Epochs = append(h.Epochs, rec)
		loss := rec.Train[0].Value
		if len(rec.Validation) > 0 {
			loss = rec.Validation[0].Value
		}
		if h.BestEpoch == 0 || loss < h.BestLoss-cfg.MinDelta {
			h.BestEpoch, h.BestLoss, h.sinceBest = epoch, loss, 0
			if cfg.Patience > 0 && !cfg.KeepLast {
				best = snapshotInto(best, params)
			}
		} else {
			h.sinceBest++
		}
		if cfg.OnEpoch != nil {
			if err := cfg.OnEpoch(progress(epoch, cfg.Epochs, batches.Len(), batches.Len(), rec.Train, rec.Validation, samples, start, doneSteps, totalSteps, true), h); err != nil {
				return h, err
			}
		}
		if cfg.Patience > 0 && h.sinceBest >= cfg.Patience {
			h.StoppedEarly = true
			break
		}
	}
	if cfg.Patience > 0 && !cfg.KeepLast && best != nil && h.BestEpoch != len(h.Epochs) {
		restore(params, best)
		h.Restored = true
	}
	return h, nil
}

func progress(epoch, epochs, step, steps int, ms, val []Metric, samples int, start time.Time, done, total int, end bool) Progress {
	el := time.Since(start)
	p := Progress{Epoch: epoch, Epochs: epochs, Step: step, Steps: steps, Metrics: ms, Validation: val, Elapsed: el, EpochEnd: end}
	if s := el.Seconds(); s > 0 {
		p.SamplesPerSec = float64(samples) / s
	}
	if done > 0 && total > done {
		p.Remaining = time.Duration(float64(el) * float64(total-done) / float64(done))
	}
	return p
}

func snapshot(ps []*layers.Param) [][]float64 { return snapshotInto(nil, ps) }

func snapshotInto(dst [][]float64, ps []*layers.Param) [][]float64 {
	if dst == nil {
		dst = make([][]float64, len(ps))
	}
	for i, p := range ps {
		if dst[i] == nil {
			dst[i] = make([]float64, p.Len())
		}
		for j := range dst[i] {
			dst[i][j] = p.At(j)
		}
	}
	return dst
}

func restore(ps []*layers.Param, snap [][]float64) {
	for i, p := range ps {
		_ = p.SetValues(snap[i])
	}
}
