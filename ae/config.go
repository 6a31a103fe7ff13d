package ae

import (
	"errors"
	"fmt"
	"math"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/optim"
)

// ErrConfig is wrapped by every configuration error.
var ErrConfig = errors.New("ae: invalid configuration")

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
	Kind  NoiseKind
	Level float64
}

// SparsityKind selects a penalty on the code.
type SparsityKind string

const (
	NoSparsity SparsityKind = ""
	// L1Sparsity adds Weight times the mean per-row L1 norm of the code.
	L1Sparsity SparsityKind = "l1"
	// KLSparsity adds Weight times sum_j KL(Target || mean activation of
	// unit j); it needs a sigmoid code (CodeActivation Sigmoid).
	KLSparsity SparsityKind = "kl"
)

// Sparsity configures a sparsity penalty. Target defaults to 0.05.
type Sparsity struct {
	Kind   SparsityKind
	Weight float64
	Target float64
}

// Reconstruction chooses the reconstruction loss.
type Reconstruction string

const (
	// MSE is the mean squared error in scaled space (default).
	MSE Reconstruction = "mse"
	// BCE is binary cross-entropy for data in [0, 1]: the decoder outputs
	// logits and reconstructions pass through a sigmoid.
	BCE Reconstruction = "bce"
)

// Config describes an autoencoder. Zero fields take the documented
// defaults; New validates the result.
type Config struct {
	// Inputs is the number of input columns. Required.
	Inputs int
	// Hidden lists the encoder's hidden widths; the decoder mirrors them.
	// Default: one hidden layer of max(2*Latent, 16) units. Use an empty
	// non-nil slice for no hidden layer.
	Hidden []int
	// Latent is the code width. Default 8.
	Latent int
	// Activation follows hidden layers. Default ReLU.
	Activation layers.Activation
	// CodeActivation follows the code layer. Default Identity.
	CodeActivation layers.Activation
	// Linear removes every activation (a linear autoencoder).
	Linear bool
	// LeakySlope for LeakyReLU. Default 0.01.
	LeakySlope float64
	// Loss is the reconstruction loss. Default MSE.
	Loss Reconstruction
	// Noise corrupts training inputs (denoising autoencoder).
	Noise Corruption
	// Sparsity penalises the code (sparse autoencoder).
	Sparsity Sparsity
	// Classes > 0 adds a supervised head on the code with that many
	// classes; rows with a label add a softmax cross-entropy term, rows
	// without one train the reconstruction only (semi-supervised).
	Classes int
	// HeadHidden lists hidden widths of the head. Default none.
	HeadHidden []int
	// HeadWeight weighs the classification term. Default 1.
	HeadWeight float64
	// HeadOnly trains the head alone (no reconstruction term), for a
	// trained encoder reused under a new head.
	HeadOnly bool
	// Encoder, when set, supplies trained encoder weights (copied); its
	// widths must match Inputs, Hidden and Latent.
	Encoder *layers.MLP `json:"-"`
	// FreezeEncoder keeps the encoder's weights fixed during training.
	FreezeEncoder bool
	// Dropout rate after hidden layers during training. Default 0.
	Dropout float64
	// Rate is Adam's learning rate. Default 1e-3.
	Rate float64
	// RateSchedule multiplies Rate per update (see package optim); nil
	// keeps it constant.
	RateSchedule optim.Schedule `json:"-"`
	// WeightDecay is AdamW's decoupled weight decay. Default 0.
	WeightDecay float64
	// ClipNorm clips gradients to this global norm when > 0.
	ClipNorm float64
	// Scaling of input columns, fitted on the training data. Default
	// standard (zero mean, unit variance).
	Scaling data.ScaleKind
	// Precision of the parameters. Default float32.
	Precision layers.Precision
	// Seed drives initialisation, noise, dropout and shuffling.
	Seed uint64
}

func (c Config) withDefaults() Config {
	if c.Latent == 0 {
		c.Latent = 8
	}
	if c.Hidden == nil {
		c.Hidden = []int{max(2*c.Latent, 16)}
	}
	if c.Activation == layers.Identity && !c.Linear {
		c.Activation = layers.ReLU
	}
	if c.Linear {
		c.Activation, c.CodeActivation = layers.Identity, layers.Identity
	}
	if c.LeakySlope == 0 {
		c.LeakySlope = 0.01
	}
	if c.Loss == "" {
		c.Loss = MSE
	}
	if c.Sparsity.Kind == KLSparsity && c.Sparsity.Target == 0 {
		c.Sparsity.Target = 0.05
	}
	if c.HeadWeight == 0 {
		c.HeadWeight = 1
	}
	if c.Rate == 0 {
		c.Rate = 1e-3
	}
	if c.Scaling == "" {
		c.Scaling = data.ScaleStandard
	}
	return c
}

func bad(format string, args ...any) error {
	return fmt.Errorf("%w: %s", ErrConfig, fmt.Sprintf(format, args...))
}

// Validate reports the first problem with a configuration (after defaults).
func (c Config) Validate() error {
	c = c.withDefaults()
	if c.Inputs <= 0 {
		return bad("Inputs is %d, want > 0", c.Inputs)
	}
	if c.Latent <= 0 {
		return bad("Latent is %d, want > 0", c.Latent)
	}
	for i, w := range c.Hidden {
		if w <= 0 {
			return bad("hidden width %d is %d", i, w)
		}
	}
	switch c.Loss {
	case MSE, BCE:
	default:
		return bad("unknown loss %q", c.Loss)
	}
	switch c.Noise.Kind {
	case NoNoise:
	case GaussianNoise:
		if !(c.Noise.Level > 0) || math.IsInf(c.Noise.Level, 0) {
			return bad("Gaussian noise level %v, want > 0", c.Noise.Level)
		}
	case MaskingNoise, SaltPepperNoise:
		if !(c.Noise.Level > 0 && c.Noise.Level < 1) {
			return bad("%s noise fraction %v outside (0, 1)", c.Noise.Kind, c.Noise.Level)
		}
	default:
		return bad("unknown noise %q", c.Noise.Kind)
	}
	switch c.Sparsity.Kind {
	case NoSparsity:
	case L1Sparsity, KLSparsity:
		if !(c.Sparsity.Weight > 0) {
			return bad("sparsity weight %v, want > 0", c.Sparsity.Weight)
		}
		if c.Sparsity.Kind == KLSparsity {
			if c.CodeActivation != layers.Sigmoid {
				return bad("KL sparsity needs CodeActivation Sigmoid")
			}
			if !(c.Sparsity.Target > 0 && c.Sparsity.Target < 1) {
				return bad("sparsity target %v outside (0, 1)", c.Sparsity.Target)
			}
		}
	default:
		return bad("unknown sparsity %q", c.Sparsity.Kind)
	}
	if c.Classes < 0 || c.Classes == 1 {
		return bad("Classes is %d, want 0 or >= 2", c.Classes)
	}
	if c.HeadOnly && c.Classes == 0 {
		return bad("HeadOnly needs Classes")
	}
	if !(c.HeadWeight > 0) {
		return bad("HeadWeight %v, want > 0", c.HeadWeight)
	}
	if !(c.Rate > 0) || math.IsInf(c.Rate, 0) {
		return bad("Rate %v, want > 0", c.Rate)
	}
	if c.WeightDecay < 0 || c.ClipNorm < 0 {
		return bad("negative weight decay or clip norm")
	}
	if !(c.Dropout >= 0 && c.Dropout < 1) {
		return bad("Dropout %v outside [0, 1)", c.Dropout)
	}
	switch c.Scaling {
	case data.ScaleNone, data.ScaleStandard, data.ScaleMinMax:
	default:
		return bad("unknown scaling %q", c.Scaling)
	}
	if !c.Precision.Valid() {
		return bad("unknown precision")
	}
	if !c.Activation.Valid() || !c.CodeActivation.Valid() {
		return bad("unknown activation")
	}
	if c.Encoder != nil {
		want := append(append([]int{c.Inputs}, c.Hidden...), c.Latent)
		if len(c.Encoder.Layers) != len(want)-1 {
			return bad("reused encoder has %d layers, want %d", len(c.Encoder.Layers), len(want)-1)
		}
		for i, d := range c.Encoder.Layers {
			if d.In != want[i] || d.Out != want[i+1] {
				return bad("reused encoder layer %d is %dx%d, want %dx%d", i, d.In, d.Out, want[i], want[i+1])
			}
		}
	}
	return nil
}
