package ae

import (
	"errors"
	"fmt"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
)

// ErrConfig is wrapped by every configuration error.
var ErrConfig = errors.New("ae: invalid configuration")

// Reconstruction chooses the reconstruction loss, which is also the
// anomaly score.
type Reconstruction string

const (
	// MSE is the mean squared error in scaled space (default).
	MSE Reconstruction = "mse"
	// BCE is binary cross-entropy for data in [0, 1]: the decoder outputs
	// logits and reconstructions pass through a sigmoid.
	BCE Reconstruction = "bce"
)

// Config describes an autoencoder's architecture. Zero fields take the
// documented defaults; New validates the result. How it is trained (the
// optimiser, input corruption, sparsity, the weight of the classification
// term) is package train's business.
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
	// Categories lists the inputs [from, to) that one-hot encode a
	// categorical column, each two or more wide and disjoint (a table
	// read by type: data.Encoding.CategorySpans). With the MSE loss the
	// decoder's outputs there are logits: the reconstruction is their
	// softmax, the levels' probabilities, and training charges the
	// softmax cross-entropy there, the squared error elsewhere. Default
	// none.
	Categories [][2]int `json:",omitempty"`
	// Image is the height, width and channels of the image rows the
	// model reads (channels last), which Channels needs.
	Image []int `json:",omitempty"`
	// Channels lists the output channels of stride-2 convolutions that
	// read the image before the encoder's dense layers, from the image
	// inward; the decoder ends with their transposes (layers.ConvPlan).
	// Default none: dense layers only.
	Channels []int `json:",omitempty"`
	// Kernel is the side of the convolutions' square kernels. Default 3.
	Kernel int `json:",omitempty"`
	// Classes > 0 adds a classification head on the code with that many
	// classes (trained on the rows that have a label).
	Classes int
	// HeadHidden lists hidden widths of the head. Default none.
	HeadHidden []int
	// Encoder, when set, supplies trained encoder weights (copied); its
	// widths must match Inputs, Hidden and Latent.
	Encoder *layers.MLP `json:"-"`
	// Dropout rate after hidden layers during training. Default 0.
	Dropout float64
	// Scaling of input columns, fitted on the training data. Default
	// standard (zero mean, unit variance).
	Scaling data.ScaleKind
	// Precision of the parameters. Default float32.
	Precision layers.Precision
	// Seed draws the initial weights and, when the model is trained, the
	// training's own random streams.
	Seed uint64
}

func (c Config) withDefaults() Config {
	if c.Latent == 0 {
		c.Latent = 8
	}
	if c.Hidden == nil {
		c.Hidden = []int{max(2*c.Latent, 16)}
	}
	if c.Activation == layers.Default {
		c.Activation = layers.ReLU
	}
	if c.CodeActivation == layers.Default {
		c.CodeActivation = layers.Identity
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
		return bad("%d input columns, want at least 1", c.Inputs)
	}
	if c.Latent <= 0 {
		return bad("code width %d, want at least 1", c.Latent)
	}
	for i, w := range c.Hidden {
		if w <= 0 {
			return bad("hidden layer %d has width %d, want at least 1", i+1, w)
		}
	}
	for i, w := range c.HeadHidden {
		if w <= 0 {
			return bad("head hidden layer %d has width %d, want at least 1", i+1, w)
		}
	}
	switch c.Loss {
	case MSE, BCE:
	default:
		return bad("unknown reconstruction loss %q (want mse or bce)", c.Loss)
	}
	if len(c.Channels) > 0 {
		if len(c.Categories) > 0 {
			return bad("convolutions read images, not a table with categories")
		}
		if _, err := layers.ImagePlan(c.Image, c.Channels, c.Kernel, false); err != nil {
			return fmt.Errorf("%w: %w", ErrConfig, err)
		}
		if w := c.Image[0] * c.Image[1] * c.Image[2]; w != c.Inputs {
			return bad("images of %dx%dx%d are %d values, not the %d inputs", c.Image[0], c.Image[1], c.Image[2], w, c.Inputs)
		}
	}
	if len(c.Categories) > 0 {
		if c.Loss != MSE {
			return bad("categories need the mse loss, not %s", c.Loss)
		}
		if err := data.CheckSpans(c.Categories, c.Inputs); err != nil {
			return bad("%v", err)
		}
	}
	if c.Classes < 0 || c.Classes == 1 {
		return bad("%d classes, want 0 or at least 2", c.Classes)
	}
	if !(c.Dropout >= 0 && c.Dropout < 1) {
		return bad("dropout %v outside [0, 1)", c.Dropout)
	}
	if !(c.LeakySlope >= 0 && c.LeakySlope < 1) {
		return bad("leaky slope %v outside [0, 1)", c.LeakySlope)
	}
	if !c.Scaling.Valid() {
		return bad("unknown scaling %q (want standard, minmax or none)", c.Scaling)
	}
	if !c.Precision.Valid() {
		return bad("unknown precision")
	}
	if !c.Activation.Concrete() || !c.CodeActivation.Concrete() {
		return bad("unknown activation")
	}
	if err := c.net("encoder").Validate(); err != nil {
		return bad("%v", err)
	}
	if err := c.net("decoder").Validate(); err != nil {
		return bad("%v", err)
	}
	if c.Encoder != nil {
		want := c.net("encoder").ParamShapes()
		got := c.Encoder.Params()
		if len(got) != len(want) {
			return bad("reused encoder has %d parameters, want %d", len(got), len(want))
		}
		for i, p := range got {
			if r, k := p.Shape(); r != want[i].Rows || k != want[i].Cols {
				return bad("reused encoder's %s is %dx%d, want %dx%d", want[i].Name, r, k, want[i].Rows, want[i].Cols)
			}
		}
	}
	if c.Classes > 0 {
		if err := layers.CheckWidths("head", c.headWidths()); err != nil {
			return bad("%v", err)
		}
	}
	return nil
}

// encoderWidths, decoderWidths and headWidths are the networks' layer
// widths (defaults filled in).
func (c Config) encoderWidths() []int {
	return append(append([]int{c.Inputs}, c.Hidden...), c.Latent)
}

func (c Config) decoderWidths() []int {
	e := c.encoderWidths()
	d := make([]int, len(e))
	for i := range e {
		d[i] = e[len(e)-1-i]
	}
	return d
}

// net is the encoder's or the decoder's layers.MLPConfig (defaults filled
// in; the caller sets nothing else).
func (c Config) net(name string) layers.MLPConfig {
	cfg := layers.MLPConfig{Name: name, Hidden: c.Activation, LinearHidden: c.Linear, LeakySlope: c.LeakySlope, Precision: c.Precision}
	out := name == "decoder"
	if out {
		cfg.Widths, cfg.Output = c.decoderWidths(), layers.Identity
	} else {
		cfg.Widths, cfg.Output = c.encoderWidths(), c.CodeActivation
	}
	cfg.Conv, _ = layers.ImagePlan(c.Image, c.Channels, c.Kernel, out)
	cfg.Dropout = c.Dropout
	return cfg
}

func (c Config) headWidths() []int {
	return append(append([]int{c.Latent}, c.HeadHidden...), c.Classes)
}
