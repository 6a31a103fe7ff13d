package train

import (
	"fmt"
	"math"
	"time"

	"github.com/quernlab/quern/internal/engine"
)

// ErrNonFinite is wrapped by every *NonFiniteError.
var ErrNonFinite = engine.ErrNonFinite

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

// Metric is one named figure of a step or an evaluation. The first metric
// is the loss.
type Metric struct {
	Name  string
	Value float64
}

// Progress is what the run reports to Settings.OnStep and OnEpoch.
type Progress struct {
	Epoch, Epochs int // 1-based epoch and the configured total
	Step, Steps   int // 1-based step within the epoch and steps per epoch
	Metrics       []Metric
	// Validation holds the epoch's validation metrics (end of epoch only;
	// nil without validation rows).
	Validation    []Metric
	SamplesPerSec float64
	Elapsed       time.Duration
	// Remaining estimates the time left from the pace so far.
	Remaining time.Duration
	EpochEnd  bool
}

// Warning is an early sign of a failing run, raised at a step (counted
// from 1 over the whole run).
type Warning struct {
	Step    int    `json:"step"`
	Kind    string `json:"kind"` // "discriminator_wins" or "collapse"
	Message string `json:"message"`
}

// EpochRecord is one epoch's averages.
type EpochRecord struct {
	Train      []Metric `json:"train"`
	Validation []Metric `json:"validation,omitempty"`
}

// History is the record of a run: per-epoch metrics, the best epoch by
// validation loss (or by training loss without validation), whether
// training stopped early, and the warnings raised. It marshals as JSON.
type History struct {
	Epochs       []EpochRecord `json:"epochs"`
	BestEpoch    int           `json:"best_epoch"` // 1-based; 0 before any epoch
	BestLoss     float64       `json:"best_loss"`
	StoppedEarly bool          `json:"stopped_early"`
	Restored     bool          `json:"restored_best"`
	Warnings     []Warning     `json:"warnings,omitempty"`
	sinceBest    int
}

// Loss returns the training and validation loss of epoch e (1-based); the
// validation loss is NaN without validation rows.
func (h *History) Loss(e int) (trainLoss, valLoss float64) {
	r := h.Epochs[e-1]
	valLoss = math.NaN()
	if len(r.Validation) > 0 {
		valLoss = r.Validation[0].Value
	}
	return r.Train[0].Value, valLoss
}

// clone copies h deeply enough that appending to the copy leaves h alone.
func (h *History) clone() *History {
	c := *h
	c.Epochs = append([]EpochRecord(nil), h.Epochs...)
	c.Warnings = append([]Warning(nil), h.Warnings...)
	c.sinceBest = len(c.Epochs) - c.BestEpoch
	return &c
}
