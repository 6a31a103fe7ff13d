package vae

import (
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"strings"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/layers"
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

// Config describes a variational autoencoder's architecture. Zero fields
// take the documented defaults; New validates the result. How it is
// trained (the optimiser, the KL weight and its schedule, free bits) is
// package train's business.
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
	// Table gives the model a table's likelihood (see table.go): for a
	// table read by type, categories (Categories) and missing cells (the
	// encoding's indicators) are scored as such. It needs a Gaussian
	// likelihood; Categories set it. Default false: every input scored by
	// Likelihood, as models written before it existed are.
	Table bool `json:",omitempty"`
	// Booleans is a table likelihood's model of a boolean column:
	// Bernoulli (the default with Table: the decoder's output its
	// log-odds) or Gaussian (like a number, as table models written before
	// booleans were Bernoulli did; their files read so).
	Booleans Likelihood `json:",omitempty"`
	// Categories lists the inputs [from, to) that one-hot encode a
	// categorical column, each two or more wide and disjoint (a table
	// read by type: data.Encoding.CategorySpans); they need a Gaussian
	// likelihood for the other inputs. The decoder's outputs there are
	// logits and a row's likelihood has the probability of its level
	// under their softmax there (a categorical distribution), the
	// Gaussian elsewhere. Default none.
	Categories [][2]int `json:",omitempty"`
	// Image is the height, width and channels of the image rows the
	// model reads (channels last), which Channels needs.
	Image []int `json:",omitempty"`
	// Channels lists the output channels of stride-2 convolutions that
	// read the image before the encoder's dense layers, from the image
	// inward; the decoder ends with their transposes (layers.ConvPlan).
	// Their weights are drawn He normal (Glorot uniform for a linear
	// model) whatever Init says. Default none: dense layers only.
	Channels []int `json:",omitempty"`
	// Kernel is the side of the convolutions' square kernels. Default 3.
	Kernel int `json:",omitempty"`
	// OutputVariance of the fixed Gaussian likelihood. Default 1.
	OutputVariance float64
	// Scaling of inputs, fitted on the training data. Default none for
	// Bernoulli (values must lie in [0, 1]) and standard for Gaussian
	// likelihoods.
	Scaling data.ScaleKind
	// Precision of the parameters. Default float32.
	Precision layers.Precision
	// Init is the weights' initialisation. Default layers.FanInUniform;
	// model files written before this field existed read as
	// layers.HeGlorot, the scheme they were drawn with.
	Init layers.Init
	// Seed draws the initial weights and, when the model is trained, the
	// training's own random streams.
	Seed uint64
}

func (c Config) withDefaults() Config {
	if c.Latent == 0 {
		c.Latent = 8
	}
	if c.Hidden == nil {
		c.Hidden = []int{max(4*c.Latent, 64)}
	}
	if c.Activation == layers.Default {
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
	if len(c.Categories) > 0 {
		c.Table = true
	}
	if c.Table && c.Booleans == "" {
		c.Booleans = Bernoulli
	}
	if c.Init == layers.InitAuto {
		c.Init = layers.FanInUniform
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
		return bad("%d input columns, want at least 1", c.Inputs)
	}
	if c.Latent <= 0 {
		return bad("latent width %d, want at least 1", c.Latent)
	}
	for i, w := range c.Hidden {
		if w <= 0 {
			return bad("hidden layer %d has width %d, want at least 1", i+1, w)
		}
	}
	switch c.Likelihood {
	case Bernoulli, Gaussian, GaussianLearned, GaussianShared:
	default:
		return bad("unknown likelihood %q", c.Likelihood)
	}
	if c.Booleans != "" && c.Booleans != Bernoulli && c.Booleans != Gaussian {
		return bad("booleans %q: want bernoulli or gaussian", c.Booleans)
	}
	if c.Table && c.Likelihood == Bernoulli {
		return bad("a table's likelihood (categories, missing cells) needs a Gaussian likelihood for the numbers, not bernoulli")
	}
	if len(c.Categories) > 0 {
		if err := data.CheckSpans(c.Categories, c.Inputs); err != nil {
			return bad("%v", err)
		}
	}
	if !(c.OutputVariance > 0) || math.IsInf(c.OutputVariance, 0) {
		return bad("output variance %v, want > 0", c.OutputVariance)
	}
	if !c.Scaling.Valid() {
		return bad("unknown scaling %q (want standard, minmax or none)", c.Scaling)
	}
	if c.Likelihood == Bernoulli && c.Scaling == data.ScaleStandard {
		return bad("a Bernoulli likelihood needs values in [0, 1]: use no scaling or min-max")
	}
	if !c.Precision.Valid() || !c.Activation.Concrete() {
		return bad("unknown precision or activation")
	}
	if len(c.Channels) > 0 {
		if c.Table {
			return bad("convolutions read images, not a table")
		}
		if _, err := layers.ImagePlan(c.Image, c.Channels, c.Kernel, false); err != nil {
			return fmt.Errorf("%w: %w", ErrConfig, err)
		}
		if w := c.Image[0] * c.Image[1] * c.Image[2]; w != c.Inputs {
			return bad("images of %dx%dx%d are %d values, not the %d inputs", c.Image[0], c.Image[1], c.Image[2], w, c.Inputs)
		}
	}
	if err := c.net("encoder").Validate(); err != nil {
		return bad("%v", err)
	}
	if err := c.net("decoder").Validate(); err != nil {
		return bad("%v", err)
	}
	return nil
}

// net is the encoder's or the decoder's layers.MLPConfig (defaults filled
// in).
func (c Config) net(name string) layers.MLPConfig {
	out := name == "decoder"
	cfg := layers.MLPConfig{Name: name, Widths: c.encoderWidths(), Hidden: c.Activation, LinearHidden: c.Linear, Precision: c.Precision, Init: c.Init}
	if out {
		cfg.Widths = c.decoderWidths()
	}
	cfg.Conv, _ = layers.ImagePlan(c.Image, c.Channels, c.Kernel, out)
	return cfg
}

func (c Config) encoderWidths() []int {
	return append(append([]int{c.Inputs}, c.Hidden...), 2*c.Latent)
}

func (c Config) decoderWidths() []int {
	w := []int{c.Latent}
	for i := len(c.Hidden) - 1; i >= 0; i-- {
		w = append(w, c.Hidden[i])
	}
	return append(w, c.Inputs)
}

// logVarShape is the shape of the learned likelihood log-variance (0 x 0
// without one).
func (c Config) logVarShape() (int, int) {
	switch c.Likelihood {
	case GaussianLearned:
		return 1, c.Inputs
	case GaussianShared:
		return 1, 1
	}
	return 0, 0
}

// UnmarshalJSON reads a configuration; one written before Config had an
// Init field was initialised by layers.HeGlorot and reads as such.
func (c *Config) UnmarshalJSON(b []byte) error {
	type plain Config
	var p plain
	if err := json.Unmarshal(b, &p); err != nil {
		return err
	}
	var keys map[string]json.RawMessage
	if err := json.Unmarshal(b, &keys); err != nil {
		return err
	}
	// encoding/json matches keys without regard to case, and so must
	// this test of whether the key is there
	has := func(name string) bool {
		return slices.ContainsFunc(slices.Collect(maps.Keys(keys)), func(k string) bool { return strings.EqualFold(k, name) })
	}
	if !has("Init") {
		p.Init = layers.HeGlorot
	}
	if p.Table && !has("Booleans") {
		// a table model from before booleans were Bernoulli
		p.Booleans = Gaussian
	}
	*c = Config(p)
	return nil
}
