package gan

import (
	"errors"
	"fmt"
	"math"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
)

// ErrConfig is wrapped by every configuration error.
var ErrConfig = errors.New("gan: invalid configuration")

// Critic selects what the discriminator's output means.
type Critic string

const (
	// BCECritic is a discriminator trained with binary cross-entropy on
	// real and generated batches: its output is a logit (default).
	BCECritic Critic = "bce"
	// Wasserstein is a critic trained on mean f(fake) - mean f(real)
	// (Arjovsky et al. 2017), kept 1-Lipschitz by spectral normalisation
	// (Miyato et al. 2018); its output is a raw score. A gradient penalty
	// (Gulrajani et al. 2017) is not offered: it needs the gradient of a
	// gradient, and gorgonia v0.9.18 cannot differentiate a graph twice.
	Wasserstein Critic = "wasserstein"
)

// Config describes a GAN's architecture. Zero fields take the documented
// defaults; New validates the result. How it is trained (the optimisers,
// the generator's objective, extra discriminator steps, label smoothing,
// the warnings) is package train's business.
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
	// Critic selects the discriminator's objective. Default BCECritic.
	Critic Critic
	// SpectralNorm divides each discriminator weight by its largest
	// singular value, estimated by one power iteration per training step
	// (always on for the Wasserstein critic).
	SpectralNorm bool
	// Classes > 0 makes the GAN conditional: a one-hot class label is fed
	// to both networks (Mirza & Osindero 2014), and every training row
	// needs a label.
	Classes int
	// Pack > 1 shows the discriminator Pack samples at once, all real or
	// all generated (PacGAN, Lin et al. 2018), a remedy for mode
	// collapse. Batch sizes must then be multiples of Pack. Default 1.
	Pack int
	// Categories lists the outputs [from, to) that one-hot encode a
	// categorical column, each two or more wide and disjoint (a table
	// read by type: data.Encoding.CategorySpans). The generator's outputs
	// there are logits: in training they pass through a Gumbel-softmax
	// (Jang et al. 2017) at Temperature, a nearly one-hot vector the
	// discriminator compares with real one-hot rows, and a sample draws
	// one level from their softmax. Those columns are not scaled.
	// Default none.
	Categories [][2]int `json:",omitempty"`
	// Temperature of the Gumbel-softmax. Default 0.5.
	Temperature float64 `json:",omitempty"`
	// Image is the height, width and channels of the image rows the
	// model makes (channels last), which Channels needs.
	Image []int `json:",omitempty"`
	// Channels lists the output channels of stride-2 convolutions that
	// read the image before the discriminator's dense layers, from the
	// image inward; the generator ends with their transposes
	// (layers.ConvPlan). A discriminator with convolutions sees one
	// unlabelled image at a time: it needs Pack 1 and no Classes.
	// Default none: dense layers only.
	Channels []int `json:",omitempty"`
	// Kernel is the side of the convolutions' square kernels. Default 3.
	Kernel int `json:",omitempty"`
	// Scaling of data columns, fitted on the training data. Default
	// standard.
	Scaling data.ScaleKind
	// Precision of the parameters. Default float32.
	Precision layers.Precision
	// Seed draws the initial weights and, when the model is trained, the
	// training's own random streams.
	Seed uint64
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
	if c.Activation == layers.Default {
		c.Activation = layers.LeakyReLU
	}
	if c.LeakySlope == 0 {
		c.LeakySlope = 0.2
	}
	if c.GenOutput == layers.Default {
		c.GenOutput = layers.Identity
	}
	if c.Critic == "" {
		c.Critic = BCECritic
	}
	if c.Critic == Wasserstein {
		c.SpectralNorm = true
	}
	if c.Pack == 0 {
		c.Pack = 1
	}
	if c.Scaling == "" {
		c.Scaling = data.ScaleStandard
	}
	if c.Temperature == 0 && len(c.Categories) > 0 {
		c.Temperature = 0.5
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
		return bad("%d data columns, want at least 1", c.Outputs)
	}
	if c.Noise <= 0 {
		return bad("noise width %d, want at least 1", c.Noise)
	}
	for _, ws := range [][]int{c.GenHidden, c.DiscHidden} {
		for i, w := range ws {
			if w <= 0 {
				return bad("hidden layer %d has width %d, want at least 1", i+1, w)
			}
		}
	}
	switch c.Critic {
	case BCECritic, Wasserstein:
	default:
		return bad("unknown critic %q", c.Critic)
	}
	if c.Classes < 0 || c.Classes == 1 {
		return bad("%d classes, want 0 or at least 2", c.Classes)
	}
	if len(c.Categories) > 0 {
		if err := data.CheckSpans(c.Categories, c.Outputs); err != nil {
			return bad("%v", err)
		}
		if !(c.Temperature > 0) || math.IsInf(c.Temperature, 0) {
			return bad("Gumbel-softmax temperature %v, want > 0", c.Temperature)
		}
	}
	if c.Pack < 1 {
		return bad("pack %d, want at least 1", c.Pack)
	}
	if !(c.LeakySlope >= 0 && c.LeakySlope < 1) {
		return bad("leaky slope %v outside [0, 1)", c.LeakySlope)
	}
	if !c.Scaling.Valid() {
		return bad("unknown scaling %q (want standard, minmax or none)", c.Scaling)
	}
	if !c.Precision.Valid() || !c.Activation.Concrete() || !c.GenOutput.Concrete() {
		return bad("unknown precision or activation")
	}
	if len(c.Channels) > 0 {
		switch {
		case len(c.Categories) > 0:
			return bad("convolutions make images, not a table with categories")
		case c.Pack > 1:
			return bad("a discriminator with convolutions sees one image at a time: pack %d needs dense layers only", c.Pack)
		case c.Classes > 0:
			return bad("a discriminator with convolutions takes no class labels (%d classes): use dense layers for a conditional GAN", c.Classes)
		}
		if _, err := layers.ImagePlan(c.Image, c.Channels, c.Kernel, false); err != nil {
			return fmt.Errorf("%w: %w", ErrConfig, err)
		}
		if w := c.Image[0] * c.Image[1] * c.Image[2]; w != c.Outputs {
			return bad("images of %dx%dx%d are %d values, not the %d outputs", c.Image[0], c.Image[1], c.Image[2], w, c.Outputs)
		}
	}
	if err := c.net("generator").Validate(); err != nil {
		return bad("%v", err)
	}
	if err := c.net("discriminator").Validate(); err != nil {
		return bad("%v", err)
	}
	return nil
}

// net is the generator's or the discriminator's layers.MLPConfig
// (defaults filled in).
func (c Config) net(name string) layers.MLPConfig {
	cfg := layers.MLPConfig{Name: name, Widths: c.discriminatorWidths(), Hidden: c.Activation, LeakySlope: c.LeakySlope, Precision: c.Precision}
	gen := name == "generator"
	if gen {
		cfg.Widths, cfg.Output = c.generatorWidths(), c.GenOutput
	}
	cfg.Conv, _ = layers.ImagePlan(c.Image, c.Channels, c.Kernel, gen)
	return cfg
}

func (c Config) generatorWidths() []int {
	return append(append([]int{c.Noise + c.Classes}, c.GenHidden...), c.Outputs)
}

func (c Config) discriminatorWidths() []int {
	return append(append([]int{c.Pack * (c.Outputs + c.Classes)}, c.DiscHidden...), 1)
}
