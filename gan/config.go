package gan

import (
	"errors"
	"fmt"
	"math"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/optim"
)

// ErrConfig is wrapped by every configuration error.
var ErrConfig = errors.New("gan: invalid configuration")

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

// Critic selects the discriminator's objective.
type Critic string

const (
	// BCECritic is a discriminator trained with binary cross-entropy on
	// real and generated batches (default).
	BCECritic Critic = "bce"
	// Wasserstein is a critic trained on mean f(fake) - mean f(real)
	// (Arjovsky et al. 2017), kept 1-Lipschitz by spectral normalisation
	// (Miyato et al. 2018); the generator then minimises -mean f(fake).
	// A gradient penalty (Gulrajani et al. 2017) is not offered: it needs
	// the gradient of a gradient, and gorgonia v0.9.18 cannot
	// differentiate a graph twice.
	Wasserstein Critic = "wasserstein"
)

// Config describes a GAN. Zero fields take the documented defaults; New
// validates the result.
type Config struct {
	// Outputs is the number of data columns. Required.
	Outputs int
	// Noise is the generator's noise dimension. Default 16.
	Noise int
	// GenHidden and DiscHidden list hidden widths. Default [128 128].
	GenHidden  []int
	DiscHidden []int
	// Activation after hidden layers. Default LeakyReLU.
	Activation layers.Activation
	// LeakySlope of LeakyReLU. Default 0.2.
	LeakySlope float64
	// GenOutput is the generator's output activation. Default Identity.
	GenOutput layers.Activation
	// Loss is the generator's objective with a BCE discriminator. Default
	// NonSaturating.
	Loss GeneratorLoss
	// Critic selects the discriminator's objective. Default BCECritic.
	Critic Critic
	// SpectralNorm divides each discriminator weight by its largest
	// singular value, estimated by one power iteration per step (always on
	// for the Wasserstein critic).
	SpectralNorm bool
	// DiscSteps is the number of discriminator updates per generator
	// update. Default 1.
	DiscSteps int
	// LabelSmoothing lowers the real label to 1-LabelSmoothing
	// (one-sided, Salimans et al. 2016). Default 0.
	LabelSmoothing float64
	// Classes > 0 makes the GAN conditional: a one-hot class label is fed
	// to both networks (Mirza & Osindero 2014), and every training row
	// needs a label.
	Classes int
	// Pack > 1 shows the discriminator Pack samples at once, all real or
	// all generated (PacGAN, Lin et al. 2018), a remedy for mode
	// collapse. Batch sizes must then be multiples of Pack. Default 1.
	Pack int
	// GenRate and DiscRate are Adam's learning rates. Default 2e-4.
	GenRate, DiscRate float64
	// Beta1 and Beta2 are Adam's moment decays. Default 0.5 and 0.999.
	Beta1, Beta2 float64
	// RateSchedule multiplies both learning rates per update (see package
	// optim); nil keeps them constant.
	RateSchedule optim.Schedule `json:"-"`
	// Scaling of data columns, fitted on the training data. Default
	// standard.
	Scaling data.ScaleKind
	// Monitor configures warnings and sample snapshots.
	Monitor Monitor
	// Precision of the parameters. Default float32.
	Precision layers.Precision
	// Seed drives initialisation, noise and shuffling.
	Seed uint64
}

// Monitor configures the trainer's warnings and sample snapshots.
type Monitor struct {
	// WinningAccuracy and WinningSteps: warn when the discriminator's
	// accuracy stays above WinningAccuracy for WinningSteps steps in a row
	// (its gradient to the generator is vanishing). Defaults 0.99 and 200.
	WinningAccuracy float64
	WinningSteps    int
	// CollapseRatio: warn when the generated batch's spread (mean column
	// standard deviation) falls below this fraction of the data's.
	// Default 0.1.
	CollapseRatio float64
	// OnWarning receives each warning as it is raised (may be nil).
	OnWarning func(Warning) `json:"-"`
	// SampleEvery > 0 passes SampleRows generated rows (raw units) to
	// OnSamples every SampleEvery generator steps.
	SampleEvery int
	SampleRows  int
	OnSamples   func(step int, rows []float32) `json:"-"`
}

func (c Config) withDefaults() Config {
	if c.Noise == 0 {
		c.Noise = 16
	}
	if c.GenHidden == nil {
		c.GenHidden = []int{128, 128}
	}
	if c.DiscHidden == nil {
		c.DiscHidden = []int{128, 128}
	}
	if c.Activation == layers.Identity {
		c.Activation = layers.LeakyReLU
	}
	if c.LeakySlope == 0 {
		c.LeakySlope = 0.2
	}
	if c.Loss == "" {
		c.Loss = NonSaturating
	}
	if c.Critic == "" {
		c.Critic = BCECritic
	}
	if c.Critic == Wasserstein {
		c.SpectralNorm = true
	}
	if c.DiscSteps == 0 {
		c.DiscSteps = 1
	}
	if c.Pack == 0 {
		c.Pack = 1
	}
	if c.GenRate == 0 {
		c.GenRate = 2e-4
	}
	if c.DiscRate == 0 {
		c.DiscRate = 2e-4
	}
	if c.Beta1 == 0 {
		c.Beta1 = 0.5
	}
	if c.Beta2 == 0 {
		c.Beta2 = 0.999
	}
	if c.Scaling == "" {
		c.Scaling = data.ScaleStandard
	}
	if c.Monitor.WinningAccuracy == 0 {
		c.Monitor.WinningAccuracy = 0.99
	}
	if c.Monitor.WinningSteps == 0 {
		c.Monitor.WinningSteps = 200
	}
	if c.Monitor.CollapseRatio == 0 {
		c.Monitor.CollapseRatio = 0.1
	}
	if c.Monitor.SampleRows == 0 {
		c.Monitor.SampleRows = 64
	}
	return c
}

func bad(format string, args ...any) error {
	return fmt.Errorf("%w: %s", ErrConfig, fmt.Sprintf(format, args...))
}

// Validate reports the first problem with a configuration (after defaults).
func (c Config) Validate() error {
	c = c.withDefaults()
	if c.Outputs <= 0 {
		return bad("Outputs is %d, want > 0", c.Outputs)
	}
	if c.Noise <= 0 {
		return bad("Noise is %d, want > 0", c.Noise)
	}
	for _, ws := range [][]int{c.GenHidden, c.DiscHidden} {
		for _, w := range ws {
			if w <= 0 {
				return bad("hidden width %d", w)
			}
		}
	}
	switch c.Loss {
	case NonSaturating, Minimax:
	default:
		return bad("unknown generator loss %q", c.Loss)
	}
	switch c.Critic {
	case BCECritic, Wasserstein:
	default:
		return bad("unknown critic %q", c.Critic)
	}
	if c.DiscSteps < 1 {
		return bad("DiscSteps %d, want >= 1", c.DiscSteps)
	}
	if !(c.LabelSmoothing >= 0 && c.LabelSmoothing < 0.5) {
		return bad("LabelSmoothing %v outside [0, 0.5)", c.LabelSmoothing)
	}
	if c.Classes < 0 || c.Classes == 1 {
		return bad("Classes %d, want 0 or >= 2", c.Classes)
	}
	if c.Pack < 1 {
		return bad("Pack %d, want >= 1", c.Pack)
	}
	for _, r := range []float64{c.GenRate, c.DiscRate} {
		if !(r > 0) || math.IsInf(r, 0) {
			return bad("learning rate %v, want > 0", r)
		}
	}
	if !(c.Beta1 >= 0 && c.Beta1 < 1 && c.Beta2 > 0 && c.Beta2 < 1) {
		return bad("Adam betas %v, %v", c.Beta1, c.Beta2)
	}
	switch c.Scaling {
	case data.ScaleNone, data.ScaleStandard, data.ScaleMinMax:
	default:
		return bad("unknown scaling %q", c.Scaling)
	}
	if !c.Precision.Valid() || !c.Activation.Valid() || !c.GenOutput.Valid() {
		return bad("unknown precision or activation")
	}
	if c.Monitor.SampleEvery < 0 {
		return bad("SampleEvery %d", c.Monitor.SampleEvery)
	}
	return nil
}
