package train

import (
	"encoding"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"github.com/quernlab/quern/layers"
	"reflect"
	"sort"
	"strconv"
	"strings"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/optim"
	"github.com/quernlab/quern/vae"
)

// A checkpoint is the model file of the model as it stands, with a
// "training" section (the settings, typed) and a "checkpoint" section:
// each optimiser's kind and step count (its moments are tensors named
// "<prefix><parameter>#<slot>", float64, 1 x n), the states of the
// shuffling and noise generators, the history, and the kind's own state
// (a GAN's step count). Resume continues the run bitwise as if it had
// never stopped.

type checkpointSection struct {
	Optimizers map[string]optimState `json:"optimizers"`
	Shuffle    string                `json:"shuffle_generator"`
	Noise      string                `json:"noise_generator"`
	History    *History              `json:"history"`
	State      json.RawMessage       `json:"kind_state,omitempty"`
}

// optimState is the JSON part of an optimiser's state.
type optimState struct {
	Kind  string `json:"kind"`
	Steps int    `json:"steps"`
	Slots int    `json:"slots"`
}

// maxSlots bounds the state vectors per parameter a checkpoint may claim
// (Adam keeps two).
const maxSlots = 2

// Checkpoint is a model file of the model with everything needed to
// resume the run: see Resume. After a Run stopped within an epoch
// (cancelled, or an error at a step) it is refused: the weights, the
// optimiser and the generators have moved past what the history records.
func (t *Trainer) Checkpoint(prov *modelfile.Provenance) (*modelfile.File, error) {
	if t.midEpoch {
		return nil, bad("the run stopped within epoch %d, past what its history records, so a checkpoint would not resume it: take checkpoints in OnEpoch or after Run returns without error", len(t.history.Epochs)+1)
	}
	f, err := t.File(prov)
	if err != nil {
		return nil, err
	}
	sec := checkpointSection{Optimizers: map[string]optimState{}, History: t.history}
	opts := t.r.optimizers()
	prefixes := make([]string, 0, len(opts))
	for p := range opts {
		prefixes = append(prefixes, p)
	}
	sort.Strings(prefixes)
	for _, p := range prefixes {
		ts, js := optimizerTensors(opts[p], p)
		f.Tensors = append(f.Tensors, ts...)
		sec.Optimizers[p] = js
	}
	for i, p := range t.r.params() {
		if t.best != nil {
			f.Tensors = append(f.Tensors, modelfile.Tensor{Name: bestPrefix + p.Name(), Rows: 1, Cols: len(t.best[i]), F64: append([]float64(nil), t.best[i]...)})
		}
	}
	if sec.Shuffle, err = generatorState(t.shuffle); err != nil {
		return nil, err
	}
	if sec.Noise, err = generatorState(t.noise); err != nil {
		return nil, err
	}
	if st := t.r.state(); st != nil {
		if sec.State, err = json.Marshal(st); err != nil {
			return nil, fmt.Errorf("train: %w", err)
		}
	}
	if err := f.SetSection("checkpoint", sec); err != nil {
		return nil, err
	}
	return f, nil
}

// Resume rebuilds a trainer from a checkpoint written by Checkpoint, or
// by the library before settings were stored in checkpoints.
//
// With s nil the run continues with the settings it was started with; to
// take it further and change nothing else, call Trainer.SetEpochs after.
// Otherwise s replaces what may change on resuming: the number of epochs
// (0 keeps the run's), patience, the minimum improvement and KeepLast (a
// zero here is zero: early stopping off), the callbacks, and a
// learning-rate schedule of the caller's own, which a checkpoint cannot
// hold. A zero batch size, optimiser or objective keeps the run's; any
// other than the run's is refused, since the run would no longer be the
// same one. A checkpoint
// from before stored settings needs s for the number of epochs and the
// batch size; its optimiser and objective come from the stored model
// configuration.
func Resume(f *modelfile.File, s *Settings) (*Trainer, error) {
	m, err := openModel(f)
	if err != nil {
		return nil, err
	}
	var sec checkpointSection
	ok, err := f.Section("checkpoint", &sec)
	if err != nil {
		return nil, fmt.Errorf("train: %w", err)
	}
	if !ok {
		if sec, ok, err = legacyCheckpoint(f); err != nil {
			return nil, err
		}
		if !ok {
			return nil, bad("this is a model file, not a checkpoint: it holds no training state")
		}
	}
	settings, err := resumeSettings(f, m.Kind(), s)
	if err != nil {
		return nil, err
	}
	t, err := New(m, settings)
	if err != nil {
		return nil, err
	}
	opts := t.r.optimizers()
	if len(sec.Optimizers) != len(opts) {
		return nil, bad("the checkpoint holds %d optimiser states, a %s model trains with %d", len(sec.Optimizers), m.Kind(), len(opts))
	}
	lens := map[string]int{}
	for _, p := range t.r.params() {
		lens[p.Name()] = p.Len()
	}
	for prefix, o := range opts {
		js, ok := sec.Optimizers[prefix]
		if !ok {
			return nil, bad("the checkpoint lacks the optimiser state %q", prefix)
		}
		if err := setOptimizer(o, f, prefix, js, lens); err != nil {
			return nil, fmt.Errorf("train: %w", err)
		}
	}
	if err := setGenerator(t.shuffle, sec.Shuffle); err != nil {
		return nil, err
	}
	if err := setGenerator(t.noise, sec.Noise); err != nil {
		return nil, err
	}
	if sec.State != nil {
		if err := t.r.restore(sec.State); err != nil {
			return nil, fmt.Errorf("train: %w", err)
		}
	}
	if sec.History == nil {
		sec.History = &History{}
	}
	if err := sec.History.check(); err != nil {
		return nil, err
	}
	t.history = sec.History.clone()
	if t.best, err = bestWeights(f, t.r.params()); err != nil {
		return nil, err
	}
	if w, ok := t.r.(warnMemory); ok {
		w.remember(t.history.Warnings)
	}
	return t, nil
}

// bestPrefix starts the names of the tensors that hold the best epoch's
// weights in a checkpoint (early stopping restores them at the end).
const bestPrefix = modelfile.TrainingPrefix + "best/"

// bestWeights reads the best epoch's weights from a checkpoint: nil when
// it holds none (no early stopping, or a checkpoint written before they
// were kept), else one per parameter, of its length.
func bestWeights(f *modelfile.File, params []*layers.Param) ([][]float64, error) {
	byName := map[string][]float64{}
	for _, t := range f.Tensors {
		if name, ok := strings.CutPrefix(t.Name, bestPrefix); ok {
			if t.F64 == nil {
				return nil, bad("the checkpoint's best weights for %q are not float64", name)
			}
			byName[name] = t.F64
		}
	}
	if len(byName) == 0 {
		return nil, nil
	}
	best := make([][]float64, len(params))
	for i, p := range params {
		v, ok := byName[p.Name()]
		if !ok || len(v) != p.Len() {
			return nil, bad("the checkpoint's best weights do not fit the parameter %q", p.Name())
		}
		best[i] = append([]float64(nil), v...) // the file stays as it was read
		delete(byName, p.Name())
	}
	for name := range byName {
		return nil, bad("the checkpoint holds best weights for %q, which the model lacks", name)
	}
	return best, nil
}

// openModel opens the model of a model file, which must be of a kind
// this package trains.
func openModel(f *modelfile.File) (Model, error) {
	m, err := model.FromFile(f)
	if err != nil {
		return nil, err
	}
	t, ok := m.(Model)
	if !ok {
		return nil, bad("cannot train a model of kind %q", f.Kind)
	}
	return t, nil
}

// resumeSettings combines the settings a checkpoint holds with the
// caller's.
func resumeSettings(f *modelfile.File, kind string, s *Settings) (Settings, error) {
	var raw struct {
		Settings json.RawMessage `json:"settings"`
	}
	ok, err := f.Section("training", &raw)
	if err != nil {
		return Settings{}, fmt.Errorf("train: %w", err)
	}
	if !ok || raw.Settings == nil {
		if s == nil {
			return Settings{}, bad("the checkpoint predates stored training settings: give the settings it was started with (at least the epochs and the batch size)")
		}
		legacy, err := legacySettings(f)
		if err != nil {
			return Settings{}, err
		}
		out := *s
		out.Objective, out.Optimizer = legacy.Objective, legacy.Optimizer
		out.Optimizer.Schedule = s.Optimizer.Schedule
		return out, nil
	}
	var rec settingsRecord
	if err := json.Unmarshal(raw.Settings, &rec); err != nil {
		return Settings{}, fmt.Errorf("train: stored settings: %w", err)
	}
	stored, err := rec.settings()
	if err != nil {
		return Settings{}, err
	}
	own := rec.Optimizer.Schedule != nil && rec.Optimizer.Schedule.Kind == ownSchedule
	if s == nil {
		if own {
			_, err := rec.Optimizer.Schedule.schedule()
			return Settings{}, err
		}
		return stored, nil
	}
	if own {
		if s.Optimizer.Schedule == nil {
			_, err := rec.Optimizer.Schedule.schedule()
			return Settings{}, err
		}
		stored.Optimizer.Schedule = s.Optimizer.Schedule
	}
	want, err := stored.resolve(kind)
	if err != nil {
		return Settings{}, err
	}
	got := *s
	if got.BatchSize == 0 {
		got.BatchSize = want.BatchSize
	}
	if got.Optimizer == (Optimizer{}) || (own && sameOptimizer(got.Optimizer, Optimizer{Schedule: got.Optimizer.Schedule})) {
		got.Optimizer = stored.Optimizer
	}
	if got.Objective == nil {
		got.Objective = stored.Objective
	}
	if got.Epochs == 0 {
		got.Epochs = want.Epochs
	}
	have, err := got.resolve(kind)
	if err != nil {
		return Settings{}, err
	}
	switch {
	case have.BatchSize != want.BatchSize:
		return Settings{}, bad("the run was started with batch size %d; resuming with %d would not continue it", want.BatchSize, have.BatchSize)
	case !sameOptimizer(have.Optimizer, want.Optimizer):
		return Settings{}, bad("the run was started with other optimiser settings; resuming would not continue it")
	case !reflect.DeepEqual(have.Objective, want.Objective):
		return Settings{}, bad("the run was started with another objective; resuming would not continue it")
	}
	return got, nil
}

func sameOptimizer(a, b Optimizer) bool {
	return a.Rate == b.Rate && a.Beta1 == b.Beta1 && a.Beta2 == b.Beta2 && a.WeightDecay == b.WeightDecay && a.ClipNorm == b.ClipNorm &&
		reflect.DeepEqual(recordSchedule(a.Schedule), recordSchedule(b.Schedule))
}

// optimizerTensors converts an optimiser's state into tensors named
// "<prefix><param>#<slot>" and its JSON part.
func optimizerTensors(o optim.Optimizer, prefix string) ([]modelfile.Tensor, optimState) {
	st := o.Export()
	js := optimState{Kind: st.Kind, Steps: st.Steps}
	names := make([]string, 0, len(st.Slots))
	for n := range st.Slots {
		names = append(names, n)
	}
	sort.Strings(names)
	var ts []modelfile.Tensor
	for _, n := range names {
		js.Slots = len(st.Slots[n])
		for i, v := range st.Slots[n] {
			if len(v) == 0 {
				continue
			}
			ts = append(ts, modelfile.Tensor{Name: fmt.Sprintf("%s%s#%d", prefix, n, i), Rows: 1, Cols: len(v), F64: append([]float64(nil), v...)})
		}
	}
	return ts, js
}

// setOptimizer restores an optimiser from tensors written by
// optimizerTensors. A legacy GAN's "adam" state restores into AdamW: the
// two update alike without weight decay, which legacy GANs did not have.
//
// lens gives the length of every parameter of the model by name: state
// for a parameter the model lacks, or of another length, is refused here
// rather than at the first step.
func setOptimizer(o optim.Optimizer, f *modelfile.File, prefix string, js optimState, lens map[string]int) error {
	if js.Slots < 0 || js.Slots > maxSlots {
		return fmt.Errorf("optimiser state %q claims %d slots per parameter, at most %d are possible", prefix, js.Slots, maxSlots)
	}
	if js.Steps < 0 {
		return fmt.Errorf("optimiser state %q has %d steps", prefix, js.Steps)
	}
	kind := js.Kind
	if kind == "adam" && o.Export().Kind == "adamw" {
		kind = "adamw"
	}
	st := &optim.State{Kind: kind, Steps: js.Steps, Slots: map[string][][]float64{}}
	for _, t := range f.Tensors {
		rest, ok := strings.CutPrefix(t.Name, prefix)
		if !ok {
			continue
		}
		i := strings.LastIndexByte(rest, '#')
		if i < 0 || t.F64 == nil || strings.Contains(rest[:i], "/") {
			if strings.Contains(rest, "/") {
				continue // another optimiser's, under a longer prefix
			}
			return fmt.Errorf("malformed optimiser tensor %q", t.Name)
		}
		slot, err := strconv.Atoi(rest[i+1:])
		if err != nil || slot < 0 || slot >= js.Slots {
			return fmt.Errorf("malformed optimiser tensor %q", t.Name)
		}
		name := rest[:i]
		if n, ok := lens[name]; !ok {
			return fmt.Errorf("optimiser state %q names a parameter %q the model lacks", prefix, name)
		} else if len(t.F64) != n {
			return fmt.Errorf("optimiser state for %q holds %d values, the parameter has %d", name, len(t.F64), n)
		}
		if st.Slots[name] == nil {
			st.Slots[name] = make([][]float64, js.Slots)
		}
		st.Slots[name][slot] = t.F64
	}
	for name, s := range st.Slots {
		for k := range s {
			if s[k] == nil {
				return fmt.Errorf("optimiser state for %q lacks slot %d", name, k)
			}
		}
	}
	return o.Import(st)
}

func generatorState(g encoding.BinaryMarshaler) (string, error) {
	b, err := g.MarshalBinary()
	if err != nil {
		return "", fmt.Errorf("train: %w", err)
	}
	return base64.StdEncoding.EncodeToString(b), nil
}

func setGenerator(g encoding.BinaryUnmarshaler, s string) error {
	b, err := base64.StdEncoding.DecodeString(s)
	if err == nil {
		err = g.UnmarshalBinary(b)
	}
	if err != nil {
		return fmt.Errorf("train: generator state in the checkpoint: %w", err)
	}
	return nil
}

// Checkpoints written before the settings were stored kept the training
// knobs in the model's "config" section and the state in "resume".

func legacySettings(f *modelfile.File) (Settings, error) {
	var s Settings
	var err error
	switch f.Kind {
	case ae.Kind:
		var c struct {
			Rate, WeightDecay, ClipNorm float64
			Noise                       Corruption
			Sparsity                    Sparsity
			HeadWeight                  float64
			HeadOnly, FreezeEncoder     bool
		}
		_, err = f.Section("config", &c)
		s.Optimizer = Optimizer{Rate: c.Rate, WeightDecay: c.WeightDecay, ClipNorm: c.ClipNorm}
		s.Objective = Reconstruction{Noise: c.Noise, Sparsity: c.Sparsity, HeadWeight: c.HeadWeight, HeadOnly: c.HeadOnly, FreezeEncoder: c.FreezeEncoder}
	case vae.Kind:
		var c struct {
			Rate, WeightDecay, ClipNorm float64
			Beta                        float64
			Schedule                    BetaSchedule
			FreeBits                    float64
		}
		_, err = f.Section("config", &c)
		s.Optimizer = Optimizer{Rate: c.Rate, WeightDecay: c.WeightDecay, ClipNorm: c.ClipNorm}
		s.Objective = Variational{Beta: c.Beta, Schedule: c.Schedule, FreeBits: c.FreeBits}
	case gan.Kind:
		var c struct {
			GenRate, DiscRate, Beta1, Beta2 float64
			Loss                            GeneratorLoss
			DiscSteps                       int
			LabelSmoothing                  float64
			Monitor                         struct {
				WinningAccuracy float64
				WinningSteps    int
				CollapseRatio   float64
			}
		}
		_, err = f.Section("config", &c)
		s.Optimizer = Optimizer{Rate: c.GenRate, Beta1: c.Beta1, Beta2: c.Beta2}
		if c.Beta1 == 0 {
			s.Optimizer.Beta1 = -1
		}
		s.Objective = Adversarial{Loss: c.Loss, DiscSteps: c.DiscSteps, LabelSmoothing: c.LabelSmoothing, DiscriminatorRate: c.DiscRate,
			WinningAccuracy: c.Monitor.WinningAccuracy, WinningSteps: c.Monitor.WinningSteps, CollapseRatio: c.Monitor.CollapseRatio}
	}
	if err != nil {
		return s, fmt.Errorf("train: %w", err)
	}
	return s, nil
}

type legacyResume struct {
	Optimizer     *optimState `json:"optimizer"`
	GenOptimizer  *optimState `json:"generator_optimizer"`
	DiscOptimizer *optimState `json:"discriminator_optimizer"`
	Noise         string      `json:"noise_generator"`
	Shuffle       string      `json:"shuffle_generator"`
	Steps         int         `json:"steps"`
	Winning       int         `json:"winning_steps"`
	Warnings      []Warning   `json:"warnings"`
	History       *History    `json:"history"`
}

func legacyCheckpoint(f *modelfile.File) (checkpointSection, bool, error) {
	var r legacyResume
	ok, err := f.Section("resume", &r)
	if !ok || err != nil {
		if err != nil {
			err = fmt.Errorf("train: %w", err)
		}
		return checkpointSection{}, false, err
	}
	sec := checkpointSection{Optimizers: map[string]optimState{}, Shuffle: r.Shuffle, Noise: r.Noise, History: r.History}
	if r.Optimizer != nil {
		sec.Optimizers[singleOptimizer] = *r.Optimizer
	}
	if r.GenOptimizer != nil && r.DiscOptimizer != nil {
		sec.Optimizers[generatorOptimizer] = *r.GenOptimizer
		sec.Optimizers[discriminatorOptimizer] = *r.DiscOptimizer
		st, err := json.Marshal(ganState{Steps: r.Steps, Winning: r.Winning})
		if err != nil {
			return sec, true, err
		}
		sec.State = st
		if sec.History != nil {
			sec.History.Warnings = r.Warnings
		}
	}
	if len(sec.Optimizers) == 0 {
		return sec, true, errors.New("train: the checkpoint's training state has no optimiser")
	}
	return sec, true, nil
}

// check refuses a stored history that later reporting could not read:
// an epoch without a training loss, or a best epoch outside the record.
func (h *History) check() error {
	n := len(h.Epochs)
	if h.BestEpoch < 0 || h.BestEpoch > n {
		return bad("the checkpoint's best epoch %d is outside its %d epochs", h.BestEpoch, n)
	}
	for i, e := range h.Epochs {
		if len(e.Train) == 0 {
			return bad("the checkpoint's history has no training loss for epoch %d", i+1)
		}
	}
	return nil
}
