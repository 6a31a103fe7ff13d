package main

import (
	"context"
	"fmt"
	"math/rand/v2"
	"runtime"
	"strings"
	"sync"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/train"
)

// Cross-fitting (the default for autoencoders scored by distance on
// tables of fewer than crossFitRows rows): the rows are dealt into folds;
// for each fold a model is trained on the other folds (stopping early on
// the fold) and reconstructs the fold's rows it never saw. Those held-out
// residuals, from every row, give the residual part of the final model's
// profile (a model's residuals on its own training rows are too small,
// the more so the fewer the rows), and each row's held-out score gives the
// threshold, so every row serves both to train and to calibrate. The
// final model then trains on all rows for the number of steps the folds
// stopped at on average. Scores of the fold models stand in for the
// final model's scores of new rows: the false-alarm rate holds to the
// extent that the fold models behave like the final one (the argument of
// cross-validation+ in Barber, Candès, Ramdas and Tibshirani, "Predictive
// inference with the jackknife+", Annals of Statistics 49, 2021, whose
// guarantee is twice the target in the worst case and about the target
// in practice).
const (
	defaultFolds = 5
	crossFitRows = 20000
)

// crossFitRecord is what the cross-fit found, kept in the run record so
// that a resumed final run needs no second cross-fit.
type crossFitRecord struct {
	Folds     int                `json:"folds"`
	Residual  *anomaly.Gaussian  `json:"residual"`
	Threshold *anomaly.Threshold `json:"threshold,omitempty"`
	// ThresholdNote is the warning calibrating the threshold gave, if any.
	ThresholdNote string `json:"threshold_note,omitempty"`
	// Steps is the mean of the folds' best step counts.
	Steps int `json:"steps"`
	// InputOnly: too few rows for the autoencoder's part of the score.
	InputOnly bool `json:"input_only,omitempty"`
	// heldOut are the rows' cross-fitted scores, for the report (not
	// kept in files: a resumed run's report shows in-sample scores)
	heldOut []float64
}

// residualFitter is what cross-fitting needs of a model: its residuals,
// and a profile with a residual part fitted elsewhere.
type residualFitter interface {
	model.Scorer
	Residuals(x []float32, rows int) ([]float32, error)
	FitProfileWith(x []float32, rows int, s ae.ProfileSettings) error
}

// foldSettings is the default run length for rows training rows: the
// budget in steps with early stopping (see chooseDefaults).
func foldSettings(rows, batch int) (epochs, patience, batches int) {
	batches = max(1, (rows+batch-1)/batch)
	epochs = max((budgetSteps+batches-1)/batches, minBudgetEpochs)
	patience = max((patienceSteps+batches-1)/batches, minPatienceEpochs)
	return epochs, patience, batches
}

// crossFit runs the folds for o's model on d and returns the record; the
// fold models are built with o.build, so they are the final model's
// shape and seed. Folds run side by side on the available cores.
func crossFit(ctx context.Context, st *status, o *trainOpts, d *data.Dataset, s train.Settings, folds int, splitSeed uint64, cal anomaly.Config) (*crossFitRecord, error) {
	inputOnly := d.Rows < minRows
	if d.Rows < 2*folds {
		return nil, fmt.Errorf("-folds %d: %d rows are too few (at least %d)", folds, d.Rows, 2*folds)
	}
	perm := rand.New(rand.NewPCG(splitSeed, stream.Split)).Perm(d.Rows)
	fs := make([]*crossFold, folds)
	for f := range fs {
		var tr, ho []int
		for i, r := range perm {
			if i%folds == f {
				ho = append(ho, r)
			} else {
				tr = append(tr, r)
			}
		}
		fs[f] = &crossFold{train: d.Subset(tr), held: d.Subset(ho)}
	}
	var mu sync.Mutex
	done := 0
	st.begin("cross-fit", func() string {
		mu.Lock()
		defer mu.Unlock()
		return fmt.Sprintf("%d of %d folds trained", done, folds)
	})
	defer st.end()
	sem := make(chan struct{}, max(1, runtime.GOMAXPROCS(0)))
	var wg sync.WaitGroup
	for _, f := range fs {
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer wg.Done()
			defer func() { <-sem }()
			f.err = f.run(ctx, o, s)
			mu.Lock()
			done++
			mu.Unlock()
		}()
	}
	wg.Wait()
	for i, f := range fs {
		if f.err != nil {
			return nil, fmt.Errorf("cross-fit fold %d of %d: %w", i+1, folds, f.err)
		}
	}
	// the residuals' width: the inputs a profile scores (a table's
	// missing-cell indicators are not)
	cols := d.Cols
	if f := fs[0]; f.held.Rows > 0 {
		cols = len(f.resid) / f.held.Rows
	}
	// residualsBut fits a Gaussian to every fold's held-out residuals
	// except fold skip's (-1: all of them, for the final model): a fold's
	// calibration scores must not come from a Gaussian fitted on its own
	// rows, or they run low and the threshold promises too little
	residualsBut := func(skip int) (*anomaly.Gaussian, error) {
		g, err := anomaly.FitGaussian(cols, func(visit func([]float32)) error {
			for i, f := range fs {
				if i == skip {
					continue
				}
				for r := 0; r+cols <= len(f.resid); r += cols {
					visit(f.resid[r : r+cols])
				}
			}
			return nil
		})
		if err != nil {
			return nil, fmt.Errorf("cross-fit: the held-out residuals: %w", err)
		}
		return g, nil
	}
	residual, err := residualsBut(-1)
	if err != nil {
		return nil, err
	}
	scores := make([]float64, 0, d.Rows)
	steps := 0
	for i, f := range fs {
		others, err := residualsBut(i)
		if err != nil {
			return nil, err
		}
		if err := f.m.FitProfileWith(f.train.X, f.train.Rows, ae.ProfileSettings{Residual: others, InputOnly: inputOnly}); err != nil {
			return nil, fmt.Errorf("cross-fit fold %d: %w", i+1, err)
		}
		s, err := f.m.RowScores(f.held.X, f.held.Rows)
		if err != nil {
			return nil, fmt.Errorf("cross-fit fold %d: %w", i+1, err)
		}
		scores = append(scores, s...)
		steps += f.steps
	}
	rec := &crossFitRecord{Folds: folds, Residual: residual, Steps: max(1, steps/folds), InputOnly: inputOnly, heldOut: scores}
	th, note, err := calibrateScores(scores, cal)
	if err != nil {
		rec.ThresholdNote = "no threshold set: " + err.Error()
	} else {
		th.CrossFitted = true
		rec.Threshold, rec.ThresholdNote = &th, note
	}
	return rec, nil
}

// crossFold is one fold of a cross-fit: its model, trained on the other
// folds' rows, and that model's residuals on the fold's own rows.
type crossFold struct {
	train, held *data.Dataset
	m           residualFitter
	steps       int // optimiser steps to the best epoch
	resid       []float32
	err         error
}

// run trains the fold's model, stopping early on the fold's rows, and
// keeps its residuals on them.
func (f *crossFold) run(ctx context.Context, o *trainOpts, s train.Settings) error {
	m, obj, err := o.build(f.train)
	if err != nil {
		return err
	}
	rf, ok := m.(residualFitter)
	if !ok {
		return fmt.Errorf("a %s model cannot be cross-fitted", o.kind)
	}
	epochs, patience, batches := foldSettings(f.train.Rows, s.BatchSize)
	if s.Epochs == 0 {
		s.Epochs = epochs
		if s.Patience == 0 {
			s.Patience = patience
		}
	}
	s.Objective, s.Callbacks = obj, train.Callbacks{}
	t, err := train.New(m, s)
	if err != nil {
		return err
	}
	h, err := t.Run(ctx, f.train, f.held)
	if err != nil {
		return err
	}
	f.m, f.steps = rf, h.BestEpoch*batches
	f.resid, err = rf.Residuals(f.held.X, f.held.Rows)
	return err
}

// calibrateScores sets a threshold from held-out normal scores as c asks,
// falling back to the largest score when there are too few for the
// target rate, and returns a warning to print (empty when none).
func calibrateScores(scores []float64, c anomaly.Config) (anomaly.Threshold, string, error) {
	th, err := anomaly.Calibrate(scores, c)
	note := ""
	if err != nil && (c.Method == "" || c.Method == anomaly.Quantile) && strings.Contains(err.Error(), "needs at least") {
		note = fmt.Sprintf("warning: %v; using the largest score instead", err)
		th, err = anomaly.Calibrate(scores, anomaly.Config{Method: anomaly.Max})
	}
	if err == nil && len(scores) < anomaly.MinCalibrationRows {
		if note != "" {
			note += "\n"
		}
		note += fmt.Sprintf("warning: the threshold rests on %s (fewer than %d): its false-alarm rate is only known to be below %.1f%% (%.0f%% confidence)", plural(len(scores), "normal row"), anomaly.MinCalibrationRows, 100*th.FalseAlarmBound, 100*anomaly.BoundConfidence)
	}
	return th, note, err
}

// thresholdSetter takes a threshold calibrated elsewhere.
type thresholdSetter interface {
	SetThreshold(anomaly.Threshold)
}
