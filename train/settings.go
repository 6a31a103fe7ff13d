package train

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"

	"github.com/quernlab/quern/optim"
)

// ErrConfig is wrapped by configuration errors.
var ErrConfig = errors.New("train: invalid settings")

func bad(format string, args ...any) error {
	return fmt.Errorf("%w: %s", ErrConfig, fmt.Sprintf(format, args...))
}

// Settings configure a training run. Zero fields take the documented
// defaults; New validates them against the model's kind.
type Settings struct {
	// Epochs is the total number of epochs of the run. Default 10.
	Epochs int
	// BatchSize is the number of rows per step. Default 64.
	BatchSize int
	// Patience stops training after this many epochs without a validation
	// loss improvement of more than MinDelta (0 disables early stopping;
	// it needs validation rows).
	Patience int
	MinDelta float64
	// KeepLast keeps the final weights after early stopping instead of
	// restoring the best epoch's weights.
	KeepLast bool
	// Optimizer configures the optimiser, the same for every kind.
	Optimizer Optimizer
	// Objective is the kind's training objective: Reconstruction for an
	// autoencoder, Variational for a VAE, Adversarial for a GAN (or a
	// pointer to one). nil means the kind's default objective; another
	// kind's is refused.
	Objective Objective
	// Callbacks watch the run; they are never stored.
	Callbacks
}

// Callbacks are the functions a run calls as it goes; each may be nil.
type Callbacks struct {
	// OnStep is called after every step.
	OnStep func(Progress)
	// OnEpoch is called after every epoch, after validation; an error
	// stops training and is returned (a checkpoint writer uses this).
	OnEpoch func(Progress, *History) error
	// OnWarning receives each warning as it is raised; the history keeps
	// them all.
	OnWarning func(Warning)
}

// Optimizer configures Adam with decoupled weight decay (AdamW, Loshchilov
// & Hutter 2019), which every kind trains with. Zero fields take the
// kind's defaults: rate 1e-3 and Beta1 0.9 for autoencoders and VAEs, rate
// 2e-4 and Beta1 0.5 for GANs; Beta2 0.999; no weight decay, no clipping,
// a constant rate.
type Optimizer struct {
	// Rate is the learning rate.
	Rate float64
	// Beta1 and Beta2 are the decays of Adam's moments, in [0, 1). A
	// negative Beta1 asks for 0 (no momentum), which the zero value cannot.
	Beta1, Beta2 float64
	// WeightDecay is the decoupled weight decay.
	WeightDecay float64
	// ClipNorm clips the gradients to this global norm when > 0.
	ClipNorm float64
	// Schedule multiplies Rate per update (see package optim); nil keeps
	// it constant. Checkpoints record optim's StepDecay, Cosine and
	// Warmup; a schedule of the caller's own must be given again to
	// resume.
	Schedule optim.Schedule
}

// Objective is a kind's training objective. Its implementations are
// Reconstruction, Variational and Adversarial.
type Objective interface {
	// kind is the model kind the objective trains.
	kind() string
}

// NoiseKind selects a corruption process for denoising training.
type NoiseKind string

const (
	// NoNoise trains a plain autoencoder.
	NoNoise NoiseKind = ""
	// GaussianNoise adds N(0, Level^2) to every input.
	GaussianNoise NoiseKind = "gaussian"
	// MaskingNoise sets a fraction Level of the inputs to zero.
	MaskingNoise NoiseKind = "masking"
	// SaltPepperNoise sets a fraction Level of the inputs to the column's
	// training minimum or maximum, half each.
	SaltPepperNoise NoiseKind = "salt_pepper"
)

// Corruption describes the noise applied to inputs during training; the
// loss is always taken against the clean input.
type Corruption struct {
	Kind  NoiseKind `json:"kind,omitempty"`
	Level float64   `json:"level,omitempty"`
}

// SparsityKind selects a penalty on the code.
type SparsityKind string

const (
	// NoSparsity adds no penalty.
	NoSparsity SparsityKind = ""
	// L1Sparsity adds Weight times the mean per-row L1 norm of the code.
	L1Sparsity SparsityKind = "l1"
	// KLSparsity adds Weight times sum_j KL(Target || mean activation of
	// unit j); it needs a sigmoid code activation.
	KLSparsity SparsityKind = "kl"
)

// Sparsity configures a sparsity penalty. Target defaults to 0.05.
type Sparsity struct {
	Kind   SparsityKind `json:"kind,omitempty"`
	Weight float64      `json:"weight,omitempty"`
	Target float64      `json:"target,omitempty"`
}

// Reconstruction is an autoencoder's objective: the reconstruction loss of
// its Config (of the clean input when Noise corrupts it), an optional
// sparsity penalty on the code, and, for a model with a classification
// head, HeadWeight times the cross-entropy of the labelled rows (rows
// without a label train the reconstruction only: semi-supervised).
type Reconstruction struct {
	// Noise corrupts training inputs (a denoising autoencoder).
	Noise Corruption `json:"noise"`
	// Sparsity penalises the code (a sparse autoencoder).
	Sparsity Sparsity `json:"sparsity"`
	// HeadWeight weighs the classification term. Default 1.
	HeadWeight float64 `json:"head_weight,omitempty"`
	// HeadOnly trains the head alone (no reconstruction term), for a
	// trained encoder reused under a new head.
	HeadOnly bool `json:"head_only,omitempty"`
	// FreezeEncoder keeps the encoder's weights fixed.
	FreezeEncoder bool `json:"freeze_encoder,omitempty"`
}

func (Reconstruction) kind() string { return "ae" }

// BetaKind selects how the KL weight changes over training.
type BetaKind string

const (
	// BetaConstant keeps beta fixed (default).
	BetaConstant BetaKind = "constant"
	// BetaLinear raises beta from 0 to Beta over Steps updates (KL
	// annealing, Bowman et al. 2016).
	BetaLinear BetaKind = "linear"
	// BetaCyclical repeats cycles of Steps updates; in each, beta rises
	// linearly from 0 to Beta over the first Ratio of the cycle and then
	// stays at Beta (Fu et al. 2019).
	BetaCyclical BetaKind = "cyclical"
)

// BetaSchedule configures the KL weight's schedule.
type BetaSchedule struct {
	Kind  BetaKind `json:"kind,omitempty"`
	Steps int      `json:"steps,omitempty"`
	// Ratio is the rising fraction of a cyclical schedule. Default 0.5.
	Ratio float64 `json:"ratio,omitempty"`
}

// Factor returns the multiplier of Beta at update number step (from 0).
// A schedule without steps (not valid in Settings) is constant.
func (s BetaSchedule) Factor(step int) float64 {
	if s.Steps <= 0 {
		return 1
	}
	switch s.Kind {
	case BetaLinear:
		return math.Min(1, float64(step)/float64(s.Steps))
	case BetaCyclical:
		r := s.Ratio
		if r == 0 {
			r = 0.5
		}
		tau := float64(step%s.Steps) / float64(s.Steps)
		return math.Min(1, tau/r)
	}
	return 1
}

// Variational is a VAE's objective: the negative ELBO with the KL term
// weighted by beta, optionally floored per latent dimension (free bits).
// Validation always reports the plain negative ELBO.
type Variational struct {
	// Beta weighs the KL term. Default 1.
	Beta float64 `json:"beta,omitempty"`
	// Schedule varies beta over training. Default constant.
	Schedule BetaSchedule `json:"schedule"`
	// FreeBits, when > 0, is the minimum KL in nats per latent dimension
	// (averaged over the batch) that the objective charges (Kingma et al.
	// 2016): dimensions below it are not pushed further toward the prior.
	FreeBits float64 `json:"free_bits,omitempty"`
}

func (Variational) kind() string { return "vae" }

// GeneratorLoss selects the generator's objective.
type GeneratorLoss string

const (
	// NonSaturating minimises -log D(G(z)) (default; Goodfellow et al.
	// 2014, section 3).
	NonSaturating GeneratorLoss = "non_saturating"
	// Minimax minimises log(1 - D(G(z))), the original game's generator
	// side, whose gradient vanishes when the discriminator wins.
	Minimax GeneratorLoss = "minimax"
)

// Adversarial is a GAN's objective: DiscSteps discriminator updates on
// real against generated rows, then one generator update, each step. The
// discriminator's loss is binary cross-entropy (with one-sided label
// smoothing) or, for a Wasserstein critic (the model's Config), the
// critic's difference of means. The run warns when the discriminator keeps
// winning or the samples collapse.
type Adversarial struct {
	// Loss is the generator's objective with a BCE discriminator. Default
	// NonSaturating.
	Loss GeneratorLoss `json:"loss,omitempty"`
	// DiscSteps is the number of discriminator updates per generator
	// update. Default 1.
	DiscSteps int `json:"disc_steps,omitempty"`
	// LabelSmoothing lowers the real label to 1-LabelSmoothing
	// (one-sided, Salimans et al. 2016). Default 0.
	LabelSmoothing float64 `json:"label_smoothing,omitempty"`
	// DiscriminatorRate is the discriminator's learning rate. Default:
	// the Optimizer's.
	DiscriminatorRate float64 `json:"discriminator_rate,omitempty"`
	// WinningAccuracy and WinningSteps: warn when the discriminator's
	// accuracy stays above WinningAccuracy for WinningSteps steps in a row
	// (its gradient to the generator is vanishing). Defaults 0.99 and 200.
	WinningAccuracy float64 `json:"winning_accuracy,omitempty"`
	WinningSteps    int     `json:"winning_steps,omitempty"`
	// CollapseRatio: warn when the generated batch's spread (mean column
	// standard deviation) falls below this fraction of the data's.
	// Default 0.1; negative: no collapse warnings.
	CollapseRatio float64 `json:"collapse_ratio,omitempty"`
}

func (Adversarial) kind() string { return "gan" }

// resolve fills the defaults of s for a model of the given kind and
// validates the result.
func (s Settings) resolve(kind string) (Settings, error) {
	if s.Epochs == 0 {
		s.Epochs = 10
	}
	if s.BatchSize == 0 {
		s.BatchSize = 64
	}
	if s.Epochs < 0 {
		return s, bad("%d epochs, want at least 1", s.Epochs)
	}
	if s.BatchSize < 0 {
		return s, bad("batch size %d, want at least 1", s.BatchSize)
	}
	if s.Patience < 0 {
		return s, bad("patience %d, want 0 (no early stopping) or more", s.Patience)
	}
	if !(s.MinDelta >= 0) || math.IsInf(s.MinDelta, 0) {
		return s, bad("minimum improvement %v, want >= 0", s.MinDelta)
	}
	o := &s.Optimizer
	rate, beta1 := 1e-3, 0.9
	if kind == "gan" {
		rate, beta1 = 2e-4, 0.5
	}
	if o.Rate == 0 {
		o.Rate = rate
	}
	switch {
	case o.Beta1 == 0:
		o.Beta1 = beta1
	case o.Beta1 < 0:
		o.Beta1 = -1 // stays negative, so resolved settings given back mean the same
	}
	if o.Beta2 == 0 {
		o.Beta2 = 0.999
	}
	if !(o.Rate > 0) || math.IsInf(o.Rate, 0) {
		return s, bad("learning rate %v, want > 0", o.Rate)
	}
	if !(o.Beta1 < 1) || !(o.Beta2 > 0 && o.Beta2 < 1) {
		return s, bad("Adam decays %v and %v, want beta1 in [0, 1) and beta2 in (0, 1)", o.Beta1, o.Beta2)
	}
	if !(o.WeightDecay >= 0) || math.IsInf(o.WeightDecay, 0) {
		return s, bad("weight decay %v, want >= 0", o.WeightDecay)
	}
	if !(o.ClipNorm >= 0) || math.IsInf(o.ClipNorm, 0) {
		return s, bad("gradient clipping norm %v, want >= 0 (0: none)", o.ClipNorm)
	}
	// a pointer to an objective means the objective (nil: the default)
	switch ob := s.Objective.(type) {
	case *Reconstruction:
		s.Objective = deref(ob)
	case *Variational:
		s.Objective = deref(ob)
	case *Adversarial:
		s.Objective = deref(ob)
	}
	if s.Objective == nil {
		switch kind {
		case "ae":
			s.Objective = Reconstruction{}
		case "vae":
			s.Objective = Variational{}
		case "gan":
			s.Objective = Adversarial{}
		}
	}
	if s.Objective == nil || s.Objective.kind() != kind {
		return s, bad("%T is not an objective for a %s model", s.Objective, kind)
	}
	var err error
	switch ob := s.Objective.(type) {
	case Reconstruction:
		s.Objective, err = ob.resolve()
	case Variational:
		s.Objective, err = ob.resolve()
	case Adversarial:
		s.Objective, err = ob.resolve(o.Rate)
	}
	return s, err
}

// deref is the objective p points to; nil for a nil p.
func deref[T Objective](p *T) Objective {
	if p == nil {
		return nil
	}
	return *p
}

func (r Reconstruction) resolve() (Reconstruction, error) {
	if r.HeadWeight == 0 {
		r.HeadWeight = 1
	}
	if r.Sparsity.Kind == KLSparsity && r.Sparsity.Target == 0 {
		r.Sparsity.Target = 0.05
	}
	switch r.Noise.Kind {
	case NoNoise:
	case GaussianNoise:
		if !(r.Noise.Level > 0) || math.IsInf(r.Noise.Level, 0) {
			return r, bad("Gaussian noise level %v, want > 0", r.Noise.Level)
		}
	case MaskingNoise, SaltPepperNoise:
		if !(r.Noise.Level > 0 && r.Noise.Level < 1) {
			return r, bad("%s noise fraction %v outside (0, 1)", r.Noise.Kind, r.Noise.Level)
		}
	default:
		return r, bad("unknown noise %q (want gaussian, masking or salt_pepper)", r.Noise.Kind)
	}
	switch r.Sparsity.Kind {
	case NoSparsity:
	case L1Sparsity, KLSparsity:
		if !(r.Sparsity.Weight > 0) || math.IsInf(r.Sparsity.Weight, 0) {
			return r, bad("sparsity weight %v, want > 0", r.Sparsity.Weight)
		}
		if r.Sparsity.Kind == KLSparsity && !(r.Sparsity.Target > 0 && r.Sparsity.Target < 1) {
			return r, bad("sparsity target %v outside (0, 1)", r.Sparsity.Target)
		}
	default:
		return r, bad("unknown sparsity %q (want l1 or kl)", r.Sparsity.Kind)
	}
	if !(r.HeadWeight > 0) || math.IsInf(r.HeadWeight, 0) {
		return r, bad("classification weight %v, want > 0", r.HeadWeight)
	}
	return r, nil
}

func (v Variational) resolve() (Variational, error) {
	if v.Beta == 0 {
		v.Beta = 1
	}
	if v.Schedule.Kind == "" {
		v.Schedule.Kind = BetaConstant
	}
	if v.Schedule.Kind == BetaCyclical && v.Schedule.Ratio == 0 {
		v.Schedule.Ratio = 0.5
	}
	if !(v.Beta > 0) || math.IsInf(v.Beta, 0) {
		return v, bad("KL weight beta %v, want > 0", v.Beta)
	}
	switch v.Schedule.Kind {
	case BetaConstant:
	case BetaLinear, BetaCyclical:
		if v.Schedule.Steps <= 0 {
			return v, bad("a %s beta schedule needs a number of steps > 0", v.Schedule.Kind)
		}
		if v.Schedule.Kind == BetaCyclical && !(v.Schedule.Ratio > 0 && v.Schedule.Ratio <= 1) {
			return v, bad("cyclical beta ratio %v outside (0, 1]", v.Schedule.Ratio)
		}
	default:
		return v, bad("unknown beta schedule %q", v.Schedule.Kind)
	}
	if !(v.FreeBits >= 0) || math.IsInf(v.FreeBits, 0) {
		return v, bad("free bits %v, want >= 0", v.FreeBits)
	}
	return v, nil
}

func (a Adversarial) resolve(rate float64) (Adversarial, error) {
	if a.Loss == "" {
		a.Loss = NonSaturating
	}
	if a.DiscSteps == 0 {
		a.DiscSteps = 1
	}
	if a.DiscriminatorRate == 0 {
		a.DiscriminatorRate = rate
	}
	if a.WinningAccuracy == 0 {
		a.WinningAccuracy = 0.99
	}
	if a.WinningSteps == 0 {
		a.WinningSteps = 200
	}
	if a.CollapseRatio == 0 {
		a.CollapseRatio = 0.1
	}
	switch a.Loss {
	case NonSaturating, Minimax:
	default:
		return a, bad("unknown generator loss %q (want non_saturating or minimax)", a.Loss)
	}
	if a.DiscSteps < 1 {
		return a, bad("%d discriminator steps per generator step, want at least 1", a.DiscSteps)
	}
	if !(a.LabelSmoothing >= 0 && a.LabelSmoothing < 0.5) {
		return a, bad("label smoothing %v outside [0, 0.5)", a.LabelSmoothing)
	}
	if !(a.DiscriminatorRate > 0) || math.IsInf(a.DiscriminatorRate, 0) {
		return a, bad("discriminator learning rate %v, want > 0", a.DiscriminatorRate)
	}
	if a.CollapseRatio < 0 {
		a.CollapseRatio = -1
	}
	if a.WinningSteps < 0 || !(a.WinningAccuracy > 0 && a.WinningAccuracy <= 1) || math.IsNaN(a.CollapseRatio) || math.IsInf(a.CollapseRatio, 0) {
		return a, bad("warning thresholds: accuracy %v for %d steps, collapse ratio %v", a.WinningAccuracy, a.WinningSteps, a.CollapseRatio)
	}
	return a, nil
}

// The settings are stored in model files and checkpoints as JSON
// (record); callbacks are not, and a schedule only when it is one of
// optim's.

type settingsRecord struct {
	Epochs         int             `json:"epochs"`
	BatchSize      int             `json:"batch_size"`
	Patience       int             `json:"patience,omitempty"`
	MinDelta       float64         `json:"min_delta,omitempty"`
	KeepLast       bool            `json:"keep_last,omitempty"`
	Optimizer      optimizerRecord `json:"optimizer"`
	Reconstruction *Reconstruction `json:"reconstruction,omitempty"`
	Variational    *Variational    `json:"variational,omitempty"`
	Adversarial    *Adversarial    `json:"adversarial,omitempty"`
}

// optimizerRecord.Beta1 is absent for the default and 0 for "no
// momentum" (a negative Beta1 in Optimizer).
type optimizerRecord struct {
	Rate        float64         `json:"rate"`
	Beta1       *float64        `json:"beta1,omitempty"`
	Beta2       float64         `json:"beta2"`
	WeightDecay float64         `json:"weight_decay,omitempty"`
	ClipNorm    float64         `json:"clip_norm,omitempty"`
	Schedule    *scheduleRecord `json:"schedule,omitempty"`
}

// scheduleRecord is a learning-rate schedule: one of optim's, or "own"
// for one the record cannot hold.
type scheduleRecord struct {
	Kind  string          `json:"kind"`
	Every int             `json:"every,omitempty"`
	Gamma float64         `json:"gamma,omitempty"`
	Steps int             `json:"steps,omitempty"`
	Min   float64         `json:"min,omitempty"`
	Then  *scheduleRecord `json:"then,omitempty"`
}

const ownSchedule = "own"

func recordSchedule(s optim.Schedule) *scheduleRecord {
	switch v := s.(type) {
	case nil:
		return nil
	case optim.StepDecay:
		return &scheduleRecord{Kind: "step_decay", Every: v.Every, Gamma: v.Gamma}
	case optim.Cosine:
		return &scheduleRecord{Kind: "cosine", Steps: v.Steps, Min: v.Min}
	case optim.Warmup:
		r := &scheduleRecord{Kind: "warmup", Steps: v.Steps, Then: recordSchedule(v.Then)}
		if r.Then != nil && r.Then.Kind == ownSchedule {
			return &scheduleRecord{Kind: ownSchedule}
		}
		return r
	}
	return &scheduleRecord{Kind: ownSchedule}
}

func (r *scheduleRecord) schedule() (optim.Schedule, error) {
	if r == nil {
		return nil, nil
	}
	switch r.Kind {
	case "step_decay":
		return optim.StepDecay{Every: r.Every, Gamma: r.Gamma}, nil
	case "cosine":
		return optim.Cosine{Steps: r.Steps, Min: r.Min}, nil
	case "warmup":
		then, err := r.Then.schedule()
		if err != nil {
			return nil, err
		}
		return optim.Warmup{Steps: r.Steps, Then: then}, nil
	case ownSchedule:
		return nil, bad("the run used a learning-rate schedule of its own, which a checkpoint cannot hold: give it again in the settings")
	}
	return nil, bad("unknown learning-rate schedule %q", r.Kind)
}

func (s Settings) record() settingsRecord {
	o := s.Optimizer
	r := settingsRecord{Epochs: s.Epochs, BatchSize: s.BatchSize, Patience: s.Patience, MinDelta: s.MinDelta, KeepLast: s.KeepLast,
		Optimizer: optimizerRecord{Rate: o.Rate, Beta2: o.Beta2, WeightDecay: o.WeightDecay, ClipNorm: o.ClipNorm, Schedule: recordSchedule(o.Schedule)}}
	if b1 := o.Beta1; b1 != 0 {
		b1 = max(b1, 0)
		r.Optimizer.Beta1 = &b1
	}
	switch ob := s.Objective.(type) {
	case Reconstruction:
		r.Reconstruction = &ob
	case Variational:
		r.Variational = &ob
	case Adversarial:
		r.Adversarial = &ob
	}
	return r
}

// settings turns a record back into Settings (a Beta1 of 0 stays 0).
func (r settingsRecord) settings() (Settings, error) {
	s := Settings{Epochs: r.Epochs, BatchSize: r.BatchSize, Patience: r.Patience, MinDelta: r.MinDelta, KeepLast: r.KeepLast}
	o := r.Optimizer
	s.Optimizer = Optimizer{Rate: o.Rate, Beta2: o.Beta2, WeightDecay: o.WeightDecay, ClipNorm: o.ClipNorm}
	if o.Beta1 != nil {
		s.Optimizer.Beta1 = *o.Beta1
		if *o.Beta1 == 0 {
			s.Optimizer.Beta1 = -1
		}
	}
	if o.Schedule != nil && o.Schedule.Kind != ownSchedule {
		sch, err := o.Schedule.schedule()
		if err != nil {
			return s, err
		}
		s.Optimizer.Schedule = sch
	}
	switch {
	case r.Reconstruction != nil:
		s.Objective = *r.Reconstruction
	case r.Variational != nil:
		s.Objective = *r.Variational
	case r.Adversarial != nil:
		s.Objective = *r.Adversarial
	}
	return s, nil
}

// MarshalJSON writes the settings as model files store them.
func (s Settings) MarshalJSON() ([]byte, error) { return json.Marshal(s.record()) }

// UnmarshalJSON reads settings written by MarshalJSON.
func (s *Settings) UnmarshalJSON(b []byte) error {
	var r settingsRecord
	if err := json.Unmarshal(b, &r); err != nil {
		return err
	}
	v, err := r.settings()
	if err != nil {
		return err
	}
	*s = v
	return nil
}
