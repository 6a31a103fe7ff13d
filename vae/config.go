package vae

import (
	"errors"
	"fmt"
	"math"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/optim"
)

// ErrConfig is wrapped by every configuration error.
var ErrConfig = errors.New("vae: invalid configuration")

// Likelihood is the decoder's observation model p(x|z).
type Likelihood string

const (
	// Bernoulli treats each value in [0, 1] as a Bernoulli mean; the
	// decoder outputs logits (default).
	Bernoulli Likelihood = "bernoulli"
	// Gaussian uses N(decoder mean, OutputVariance) per value, fixed.
	Gaussian Likelihood = "gaussian"
	// GaussianLearned learns one variance per input column.
	GaussianLearned Likelihood = "gaussian_learned"
	// GaussianShared learns one variance shared by all columns.
	GaussianShared Likelihood = "gaussian_shared"
)

// ScheduleKind selects how the KL weight beta changes over training.
type ScheduleKind string

const (
	// Constant keeps beta fixed (default).
	Constant ScheduleKind = "constant"
	// Linear raises beta from 0 to Beta over Steps updates (KL annealing,
	// Bowman et al. 2016).
	Linear ScheduleKind = "linear"
	// Cyclical repeats cycles of Steps updates; in each, beta rises
	// linearly from 0 to Beta over the first Ratio of the cycle and then
	// stays at Beta (Fu et al. 2019).
	Cyclical ScheduleKind = "cyclical"
)

// BetaSchedule configures the KL weight's schedule.
type BetaSchedule struct {
	Kind  ScheduleKind
	Steps int
	// Ratio is the rising fraction of a cyclical schedule. Default 0.5.
	Ratio float64
}

// Factor returns the multiplier of Beta at update number step (from 0).
func (s BetaSchedule) Factor(step int) float64 {
	switch s.Kind {
	case Linear:
		return math.Min(1, float64(step)/float64(s.Steps))
	case Cyclical:
		r := s.Ratio
		if r == 0 {
			r = 0.5
		}
		tau := float64(step%s.Steps) / float64(s.Steps)
		return math.Min(1, tau/r)
	}
	return 1
}

// Config describes a variational autoencoder. Zero fields take the
// documented defaults; New validates the result.
type Config struct {
	// Inputs is the number of input columns. Required.
	Inputs int
	// Hidden lists the encoder's hidden widths; the decoder mirrors them.
	// Default: one layer of max(4*Latent, 64). An empty non-nil slice
	// means none.
	Hidden []int
	// Latent is the latent dimension. Default 8.
	Latent int
	// Activation after hidden layers. Default ReLU.
	Activation layers.Activation
	// Linear removes every activation (a linear VAE).
	Linear bool
	// Likelihood of the decoder. Default Bernoulli.
	Likelihood Likelihood
	// OutputVariance of the fixed Gaussian likelihood. Default 1.
	OutputVariance float64
	// Beta weighs the KL term. Default 1.
	Beta float64
	// Schedule varies beta over training. Default constant.
	Schedule BetaSchedule
	// FreeBits, when > 0, is the minimum KL in nats per latent dimension
	// (averaged over the batch) that the objective charges (Kingma et al.
	// 2016): dimensions below it are not pushed further toward the prior.
	FreeBits float64
	// Rate is Adam's learning rate. Default 1e-3.
	Rate float64
	// RateSchedule multiplies Rate per update (see package optim); nil
	// keeps it constant.
	RateSchedule optim.Schedule `json:"-"`
	// WeightDecay is AdamW's decoupled weight decay. Default 0.
	WeightDecay float64
	// ClipNorm clips gradients to this global norm when > 0.
	ClipNorm float64
	// Scaling of inputs, fitted on the training data. Default none for
	// Bernoulli (values must lie in [0, 1]) and standard for Gaussian
	// likelihoods.
	Scaling data.ScaleKind
	// Precision of the parameters. Default float32.
	Precision layers.Precision
	// Seed drives initialisation, noise and shuffling.
	Seed uint64
}

func (c Config) withDefaults() Config {
	if c.Latent == 0 {
		c.Latent = 8
	}
	if c.Hidden == nil {
		c.Hidden = []int{max(4*c.Latent, 64)}
	}
	if c.Activation == layers.Identity && !c.Linear {
		c.Activation = layers.ReLU
	}
	if c.Linear {
		c.Activation = layers.Identity
	}
	if c.Likelihood == "" {
		c.Likelihood = Bernoulli
	}
	if c.OutputVariance == 0 {
		c.OutputVariance = 1
	}
	if c.Beta == 0 {
		c.Beta = 1
	}
	if c.Schedule.Kind == "" {
		c.Schedule.Kind = Constant
	}
	if c.Schedule.Kind == Cyclical && c.Schedule.Ratio == 0 {
		c.Schedule.Ratio = 0.5
	}
	if c.Rate == 0 {
		c.Rate = 1e-3
	}
	if c.Scaling == "" {
		c.Scaling = data.ScaleStandard
		if c.Likelihood == Bernoulli {
			c.Scaling = data.ScaleNone
		}
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
	switch c.Likelihood {
	case Bernoulli, Gaussian, GaussianLearned, GaussianShared:
	default:
		return bad("unknown likelihood %q", c.Likelihood)
	}
	if !(c.OutputVariance > 0) || math.IsInf(c.OutputVariance, 0) {
		return bad("OutputVariance %v, want > 0", c.OutputVariance)
	}
	if !(c.Beta > 0) || math.IsInf(c.Beta, 0) {
		return bad("Beta %v, want > 0", c.Beta)
	}
	switch c.Schedule.Kind {
	case Constant:
	case Linear, Cyclical:
		if c.Schedule.Steps <= 0 {
			return bad("%s schedule needs Steps > 0", c.Schedule.Kind)
		}
		if c.Schedule.Kind == Cyclical && !(c.Schedule.Ratio > 0 && c.Schedule.Ratio <= 1) {
			return bad("cyclical ratio %v outside (0, 1]", c.Schedule.Ratio)
		}
	default:
		return bad("unknown schedule %q", c.Schedule.Kind)
	}
	if c.FreeBits < 0 || math.IsNaN(c.FreeBits) {
		return bad("FreeBits %v, want >= 0", c.FreeBits)
	}
	if !(c.Rate > 0) || math.IsInf(c.Rate, 0) {
		return bad("Rate %v, want > 0", c.Rate)
	}
	if c.WeightDecay < 0 || c.ClipNorm < 0 {
		return bad("negative weight decay or clip norm")
	}
	switch c.Scaling {
	case data.ScaleNone, data.ScaleStandard, data.ScaleMinMax:
	default:
		return bad("unknown scaling %q", c.Scaling)
	}
	if c.Likelihood == Bernoulli && c.Scaling == data.ScaleStandard {
		return bad("a Bernoulli likelihood needs values in [0, 1]: use no scaling or min-max")
	}
	if !c.Precision.Valid() || !c.Activation.Valid() {
		return bad("unknown precision or activation")
	}
	return nil
}
