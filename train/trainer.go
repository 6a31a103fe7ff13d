package train

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/vae"
)

// Model is a model this package can train: an *ae.Model, a *vae.Model or
// a *gan.Model.
type Model interface {
	Kind() string
	File(prov *modelfile.Provenance) (*modelfile.File, error)
}

// Trainer trains one model. It owns everything training needs beside the
// model's weights and scaler: the compiled graphs, the optimisers, the
// random generators (seeded from the model's Seed), the history and the
// kind's own state, all of which a checkpoint holds. A Trainer is not safe
// for concurrent use; the model's inference methods may be called between
// runs (and from the callbacks).
type Trainer struct {
	model   Model
	s       Settings
	r       recipe
	seed    uint64
	shuffle *rand.PCG
	noise   *rand.PCG
	history *History
	// midEpoch: the last Run stopped within an epoch (see Checkpoint).
	midEpoch bool
	// best is the best epoch's weights, in the order of the recipe's
	// params (nil without early stopping, or before the first epoch).
	best [][]float64
}

// New returns a trainer for m with the settings s (zero fields: the
// defaults, see Settings).
func New(m Model, s Settings) (*Trainer, error) {
	switch m := m.(type) {
	case nil:
		return nil, bad("no model")
	case *ae.Model:
		if m == nil {
			return nil, bad("no model (a nil *ae.Model)")
		}
	case *vae.Model:
		if m == nil {
			return nil, bad("no model (a nil *vae.Model)")
		}
	case *gan.Model:
		if m == nil {
			return nil, bad("no model (a nil *gan.Model)")
		}
	}
	s, err := s.resolve(m.Kind())
	if err != nil {
		return nil, err
	}
	t := &Trainer{model: m, s: s, history: &History{}}
	switch m := m.(type) {
	case *ae.Model:
		t.seed = m.Config().Seed
	case *vae.Model:
		t.seed = m.Config().Seed
	case *gan.Model:
		t.seed = m.Config().Seed
	default:
		return nil, bad("cannot train a %T", m)
	}
	t.shuffle, t.noise = rand.NewPCG(t.seed, stream.Shuffle), rand.NewPCG(t.seed, stream.Noise)
	noise := rand.New(t.noise)
	switch m := m.(type) {
	case *ae.Model:
		t.r, err = newAERecipe(m, s, noise)
	case *vae.Model:
		t.r, err = newVAERecipe(m, s, noise)
	case *gan.Model:
		t.r, err = newGANRecipe(m, s, noise, t.warn)
	}
	if err != nil {
		return nil, err
	}
	return t, nil
}

func (t *Trainer) warn(w Warning) {
	t.history.Warnings = append(t.history.Warnings, w)
	if t.s.OnWarning != nil {
		t.s.OnWarning(w)
	}
}

// Model returns the model being trained.
func (t *Trainer) Model() Model { return t.model }

// Settings returns the run's settings with the defaults filled in.
func (t *Trainer) Settings() Settings { return t.s }

// History returns the run's history so far (the trainer's own; do not
// change it).
func (t *Trainer) History() *History { return t.history }

// SetCallbacks replaces the run's callbacks.
func (t *Trainer) SetCallbacks(c Callbacks) { t.s.Callbacks = c }

// SetEpochs changes the run's total number of epochs, so that a finished
// or resumed run can be taken further.
func (t *Trainer) SetEpochs(n int) error {
	if n < 1 {
		return bad("%d epochs, want at least 1", n)
	}
	t.s.Epochs = n
	return nil
}

// Run trains on trainSet, evaluating valSet (may be nil) after every
// epoch, until the run has Settings.Epochs epochs or stops early. The
// first run fits the model's scaler on trainSet; a later run (or a resumed
// one) continues where the history ends. Cancelling ctx stops between
// steps with ctx's error; a NaN or infinite loss or gradient is a
// *NonFiniteError naming the epoch and step. The history is returned
// even when training stops with an error.
func (t *Trainer) Run(ctx context.Context, trainSet, valSet *data.Dataset) (*History, error) {
	// refused before prepare fits the scaler and names the columns
	if trainSet == nil || trainSet.Rows == 0 {
		return t.history, fmt.Errorf("%w: no training rows", ErrConfig)
	}
	if t.s.Patience > 0 && valSet == nil {
		return t.history, fmt.Errorf("%w: early stopping (patience %d) needs validation rows", ErrConfig, t.s.Patience)
	}
	tr, va, err := t.r.prepare(trainSet, valSet)
	if err != nil {
		return t.history, err
	}
	l := &loop{r: t.r, s: t.s, shuffle: rand.New(t.shuffle), seed: t.seed, h: t.history, mid: &t.midEpoch, best: &t.best}
	err = l.run(ctx, tr, va)
	return t.history, err
}

// Release frees the compiled graphs; a later Run builds them again.
func (t *Trainer) Release() { t.r.release() }

// trainingSection is the "training" section of a model file written by a
// trainer: the settings and a summary of the history.
type trainingSection struct {
	Settings     Settings `json:"settings"`
	Epochs       int      `json:"epochs_run"`
	TrainLoss    *float64 `json:"final_train_loss,omitempty"`
	ValLoss      *float64 `json:"final_validation_loss,omitempty"`
	BestEpoch    int      `json:"best_epoch"`
	StoppedEarly bool     `json:"stopped_early,omitempty"`
	Warnings     int      `json:"warnings,omitempty"`
}

// Summary is what a model file records of the run that trained it.
type Summary struct {
	Settings  Settings
	Epochs    int
	BestEpoch int
	// TrainLoss and ValidationLoss are the last epoch's (NaN when the
	// run had no epoch, or no validation rows).
	TrainLoss, ValidationLoss float64
	StoppedEarly              bool
	Warnings                  int
}

func (t *Trainer) section() trainingSection {
	h := t.history
	sec := trainingSection{Settings: t.s, Epochs: len(h.Epochs), BestEpoch: h.BestEpoch, StoppedEarly: h.StoppedEarly, Warnings: len(h.Warnings)}
	if n := len(h.Epochs); n > 0 {
		tl, vl := h.Loss(n)
		sec.TrainLoss = &tl
		if len(h.Epochs[n-1].Validation) > 0 {
			sec.ValLoss = &vl
		}
	}
	return sec
}

// File is the model file of the trained model: the model's own sections,
// prov (may be nil) and a "training" section with the settings and a
// summary of the run.
func (t *Trainer) File(prov *modelfile.Provenance) (*modelfile.File, error) {
	f, err := t.model.File(prov)
	if err != nil {
		return nil, err
	}
	if err := f.SetSection("training", t.section()); err != nil {
		return nil, err
	}
	return f, nil
}

// SummaryOf returns the "training" section of a model file written by a
// trainer (false when it has none).
func SummaryOf(f *modelfile.File) (Summary, bool, error) {
	var sec trainingSection
	ok, err := f.Section("training", &sec)
	if !ok || err != nil {
		return Summary{}, ok, err
	}
	s := Summary{Settings: sec.Settings, Epochs: sec.Epochs, BestEpoch: sec.BestEpoch, StoppedEarly: sec.StoppedEarly,
		Warnings: sec.Warnings, TrainLoss: math.NaN(), ValidationLoss: math.NaN()}
	if sec.TrainLoss != nil {
		s.TrainLoss = *sec.TrainLoss
	}
	if sec.ValLoss != nil {
		s.ValidationLoss = *sec.ValLoss
	}
	return s, true, nil
}
