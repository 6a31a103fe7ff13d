package layers

import (
	"fmt"
	"math/rand/v2"
)

// ConvPlan puts convolutions at a network's image end. A network whose
// input is an image (an encoder, a discriminator) runs its convolutions
// first and its dense layers on their flattened output; a network whose
// output is an image (a decoder, a generator) runs its dense layers to the
// innermost feature map and then the transposed convolutions, in the
// reverse order, out to the image.
//
// Every convolution has a square Kernel, stride 2 and padding
// (Kernel-1)/2, so that each one halves the height and width (rounding
// up for the default kernel of 3): 28x28 becomes 14x14 and then 7x7. A
// transposed convolution is the exact transpose of its convolution
// (layers.ConvTransposeForward), so the decoder gives back the image's
// own height and width, odd or even, with no output padding to choose.
type ConvPlan struct {
	// Image is the height, width and channels of the image rows at the
	// network's image end (channels last, as quern reads images).
	// Required.
	Image [3]int
	// Channels lists each convolution's output channels from the image
	// inward; at least one. Required.
	Channels []int
	// Kernel is the side of every kernel. Default 3.
	Kernel int
	// Out says the image is the network's output (transposed
	// convolutions after the dense layers); otherwise it is the input.
	Out bool
}

// PlanError is a ConvPlan that cannot be built, in the plan's own terms:
// Conv is the convolution at fault (1-based from the image end; 0 for
// the plan as a whole). It wraps ErrConfig.
type PlanError struct {
	Conv int
	Msg  string
}

func (e *PlanError) Error() string {
	if e.Conv > 0 {
		return fmt.Sprintf("layers: convolution %d: %s", e.Conv, e.Msg)
	}
	return "layers: " + e.Msg
}

func (e *PlanError) Unwrap() error { return ErrConfig }

func planErr(conv int, format string, args ...any) error {
	return &PlanError{conv, fmt.Sprintf(format, args...)}
}

// convStride is the stride of every convolution of a ConvPlan.
const convStride = 2

func (p ConvPlan) withDefaults() ConvPlan {
	if p.Kernel == 0 {
		p.Kernel = 3
	}
	return p
}

// Shapes is the geometry of each convolution from the image inward (a
// transposed convolution is described by the convolution it transposes).
func (p ConvPlan) Shapes() ([]ConvShape, error) {
	p = p.withDefaults()
	h, w, c := p.Image[0], p.Image[1], p.Image[2]
	if h <= 0 || w <= 0 || c <= 0 {
		return nil, planErr(0, "convolutions over images of %dx%d with %d channels", h, w, c)
	}
	if int64(h)*int64(w)*int64(c) > MaxWidth {
		return nil, planErr(0, "images of %dx%dx%d have over %d values", h, w, c, MaxWidth)
	}
	if len(p.Channels) == 0 || len(p.Channels) > MaxLayers {
		return nil, planErr(0, "%d convolutions, want 1 to %d", len(p.Channels), MaxLayers)
	}
	if p.Kernel < 1 || p.Kernel > 64 {
		return nil, planErr(0, "kernel side %d, want 1 to 64", p.Kernel)
	}
	shapes := make([]ConvShape, 0, len(p.Channels))
	params := int64(0)
	for i, oc := range p.Channels {
		if oc <= 0 || oc > MaxWidth {
			return nil, planErr(i+1, "%d channels, want 1 to %d", oc, MaxWidth)
		}
		s := ConvShape{H: h, W: w, C: c, OutC: oc, KH: p.Kernel, KW: p.Kernel, Stride: convStride, Pad: (p.Kernel - 1) / 2}
		if err := s.Check(); err != nil {
			return nil, planErr(i+1, "its %dx%d input is too small for a %dx%d kernel at stride 2", h, w, p.Kernel, p.Kernel)
		}
		params += int64(s.OutC)*int64(s.K()) + int64(max(s.OutC, s.C))
		oh, ow := s.Out()
		if params > MaxParams || int64(oh)*int64(ow)*int64(oc) > MaxWidth {
			return nil, planErr(i+1, "makes the network too large (over %d parameters, or over %d values in a feature map)", MaxParams, MaxWidth)
		}
		shapes = append(shapes, s)
		h, w, c = oh, ow, oc
	}
	return shapes, nil
}

// ImageWidth is the number of values in an image row, H*W*C.
func (p ConvPlan) ImageWidth() int { return p.Image[0] * p.Image[1] * p.Image[2] }

// InnerWidth is the number of values in the innermost feature map, where
// the dense layers meet the convolutions (0 for an invalid plan).
func (p ConvPlan) InnerWidth() int {
	s, err := p.Shapes()
	if err != nil {
		return 0
	}
	return s[len(s)-1].OutWidth()
}

// Conv is a convolution layer of a network, or a transposed one, and its
// activation. Its weights are OutC x K for a convolution and Cin x K for
// a transposed one (Cin = Shape.OutC): in both, Shape.OutC x Shape.K().
type Conv struct {
	Shape      ConvShape
	Transposed bool
	Act        Activation
	Slope      float64
	W, B       *Param
}

// In and Out are the lengths of an input and an output row.
func (c *Conv) In() int {
	if c.Transposed {
		return c.Shape.OutWidth()
	}
	return c.Shape.InWidth()
}

func (c *Conv) Out() int {
	if c.Transposed {
		return c.Shape.InWidth()
	}
	return c.Shape.OutWidth()
}

// Params returns the weight and bias.
func (c *Conv) Params() []*Param { return []*Param{c.W, c.B} }

// biasWidth is the number of output channels.
func (c *Conv) biasWidth() int {
	if c.Transposed {
		return c.Shape.C
	}
	return c.Shape.OutC
}

// convName names convolution i (counted from the image end).
func convName(net string, i int) string { return fmt.Sprintf("%s.conv%d", net, i) }

// convShapes lists the parameters of the plan's convolutions in the order
// the network applies them.
func (p ConvPlan) paramShapes(net string) []ParamShape {
	shapes, err := p.Shapes()
	if err != nil {
		return nil
	}
	out := make([]ParamShape, 0, 2*len(shapes))
	for j := range shapes {
		i := j
		if p.Out {
			i = len(shapes) - 1 - j
		}
		s := shapes[i]
		bias := s.OutC
		if p.Out {
			bias = s.C
		}
		out = append(out, ParamShape{convName(net, i) + ".weight", s.OutC, s.K()}, ParamShape{convName(net, i) + ".bias", 1, bias})
	}
	return out
}

// denseWidths is the widths of the dense part of a network whose widths
// run from an image (or to one): the image end is the innermost map.
func (c MLPConfig) denseWidths() []int {
	if c.Conv == nil || len(c.Widths) < 2 {
		return c.Widths
	}
	w := append([]int(nil), c.Widths...)
	if c.Conv.Out {
		w[len(w)-1] = c.Conv.InnerWidth()
	} else {
		w[0] = c.Conv.InnerWidth()
	}
	return w
}

// validateConv checks the plan against the widths.
func (c MLPConfig) validateConv() error {
	p := c.Conv
	if p == nil {
		return nil
	}
	shapes, err := p.Shapes()
	if err != nil {
		return fmt.Errorf("MLP %q: %w", c.Name, err)
	}
	end, at := c.Widths[0], "input"
	if p.Out {
		end, at = c.Widths[len(c.Widths)-1], "output"
	}
	if end != p.ImageWidth() {
		return fmt.Errorf("%w: MLP %q has %d %s values, not the %d of %dx%dx%d images", ErrConfig, c.Name, end, at, p.ImageWidth(), p.Image[0], p.Image[1], p.Image[2])
	}
	params := 0
	for _, s := range shapes {
		params += s.OutC*s.K() + max(s.OutC, s.C)
	}
	w := c.denseWidths()
	for i := 1; i < len(w); i++ {
		params += (w[i-1] + 1) * w[i]
		if params > MaxParams {
			return fmt.Errorf("%w: MLP %q has over %d parameters", ErrConfig, c.Name, MaxParams)
		}
	}
	return nil
}

// newConvs makes the plan's layers in the order the network applies them,
// their weights drawn from rng (He normal for ReLU-like activations,
// Glorot uniform otherwise; a transposed convolution's fan-in is the
// number of weights that reach one output value, Cin*KH*KW/stride^2).
func newConvs(name string, p ConvPlan, hidden, last Activation, slope float64, prec Precision, rng *rand.Rand) []*Conv {
	shapes, _ := p.Shapes() // validated
	convs := make([]*Conv, len(shapes))
	for j := range shapes {
		i, act := j, hidden
		if p.Out {
			i = len(shapes) - 1 - j
			if j == len(shapes)-1 {
				act = last
			}
		}
		s := shapes[i]
		c := &Conv{Shape: s, Transposed: p.Out, Act: act, Slope: slope}
		c.W = NewParam(convName(name, i)+".weight", s.OutC, s.K(), prec)
		c.B = NewParam(convName(name, i)+".bias", 1, c.biasWidth(), prec)
		fanIn, fanOut := s.K(), s.OutC*s.KH*s.KW
		if p.Out {
			fanIn, fanOut = max(1, s.OutC*s.KH*s.KW/(convStride*convStride)), s.K()
		}
		if act == ReLU || act == LeakyReLU || act == ELU {
			FillHeNormal(c.W, fanIn, rng)
		} else {
			FillGlorotUniform(c.W, fanIn, fanOut, rng)
		}
		convs[j] = c
	}
	return convs
}

// maxPatchValues bounds the patch buffer of a graph-free pass: rows go
// through a convolution in blocks whose patches fit it (4 MiB in
// float32), so that scoring many rows at once, or many draws of each, does
// not hold every row's patches. Common practice, no source.
const maxPatchValues = 1 << 20

// convBlock is how many rows of c go through at once in a graph-free pass.
func convBlock(c *Conv) int {
	oh, ow := c.Shape.Out()
	return max(1, maxPatchValues/(oh*ow*c.Shape.K()))
}

// convForward32 runs one convolution layer on rows of x into dst (rows x
// c.Out() values), block by block with ws's patch buffer, and applies its
// activation. Each output value is the same dot product whatever the
// blocks, so the result is the training graph's bit for bit.
func convForward32(c *Conv, dst, x []float32, rows int, ws *Workspace) []float32 {
	in, out, blk := c.In(), c.Out(), convBlock(c)
	for r := 0; r < rows; r += blk {
		n := min(blk, rows-r)
		d, xs := dst[r*out:(r+n)*out], x[r*in:(r+n)*in]
		if c.Transposed {
			_, ws.cols32 = ConvTransposeForward(d, ws.cols32, xs, c.W.v32, c.B.v32, n, c.Shape)
		} else {
			_, ws.cols32 = ConvForward(d, ws.cols32, xs, c.W.v32, c.B.v32, n, c.Shape)
		}
	}
	applyInPlace32(c.Act, dst, float32(c.Slope))
	return dst
}

func convForward64(c *Conv, dst, x []float64, rows int, ws *Workspace) []float64 {
	in, out, blk := c.In(), c.Out(), convBlock(c)
	for r := 0; r < rows; r += blk {
		n := min(blk, rows-r)
		d, xs := dst[r*out:(r+n)*out], x[r*in:(r+n)*in]
		if c.Transposed {
			_, ws.cols64 = ConvTransposeForward(d, ws.cols64, xs, c.W.v64, c.B.v64, n, c.Shape)
		} else {
			_, ws.cols64 = ConvForward(d, ws.cols64, xs, c.W.v64, c.B.v64, n, c.Shape)
		}
	}
	applyInPlace64(c.Act, dst, c.Slope)
	return dst
}

// ImagePlan is the ConvPlan of a model's settings: nil without channels,
// an error naming the problem when the channels have no image shape of
// three positive sizes. out says the image is the network's output.
func ImagePlan(image, channels []int, kernel int, out bool) (*ConvPlan, error) {
	if len(channels) == 0 {
		return nil, nil
	}
	if len(image) != 3 || image[0] <= 0 || image[1] <= 0 || image[2] <= 0 {
		return nil, planErr(0, "convolutions need image rows of a height, width and channels, got %v", image)
	}
	p := &ConvPlan{Image: [3]int{image[0], image[1], image[2]}, Channels: channels, Kernel: kernel, Out: out}
	if _, err := p.Shapes(); err != nil {
		return nil, err
	}
	return p, nil
}
