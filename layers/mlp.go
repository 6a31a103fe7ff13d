package layers

import (
	"errors"
	"fmt"
	"math/rand/v2"

	"github.com/quernlab/quern/internal/kernel/gemm"
	"github.com/quernlab/quern/internal/kernel/vec"
	"gonum.org/v1/gonum/blas"
)

// Dense is an affine layer y = act(x W + b) with W of shape In x Out and b
// of shape 1 x Out.
type Dense struct {
	In, Out int
	Act     Activation
	// Slope is the negative-side slope of LeakyReLU.
	Slope float64
	// Dropout is the rate at which the layer's outputs are dropped during
	// training (inverted dropout); inference ignores it.
	Dropout float64
	W, B    *Param
}

// Params returns the weight and bias.
func (d *Dense) Params() []*Param { return []*Param{d.W, d.B} }

// MLPConfig describes a stack of dense layers. Zero fields take the
// documented defaults.
type MLPConfig struct {
	// Name prefixes every parameter name: "<Name>.<layer>.weight" and
	// "<Name>.<layer>.bias". Default "mlp".
	Name string
	// Widths lists the layer widths from input to output; at least two
	// entries, all positive. Required.
	Widths []int
	// Hidden is the activation after every layer but the last. Default
	// ReLU.
	Hidden Activation
	// LinearHidden forces identity activations on hidden layers.
	LinearHidden bool
	// Output is the activation after the last layer. Default Identity.
	Output Activation
	// LeakySlope is the LeakyReLU negative slope. Default 0.01.
	LeakySlope float64
	// Init is the weight initialisation. Default InitAuto.
	Init Init
	// Dropout is the training-time dropout rate after each hidden layer,
	// in [0, 1). Default 0.
	Dropout float64
	// Precision of the parameters. Default Float32.
	Precision Precision
	// Conv, when set, puts convolutions at the network's image end (see
	// ConvPlan); Widths still run from the network's input to its
	// output, the image end's width being the image's H*W*C. The
	// convolutions' activation is Hidden, but for the last transposed
	// one of an image-output network, which takes Output. Default none.
	Conv *ConvPlan
}

// MLP is a feed-forward network: a chain of Dense layers, with
// convolutions before them (Front, for an image input) or transposed
// convolutions after them (Back, for an image output) when it was built
// with a ConvPlan.
type MLP struct {
	Name   string
	Front  []*Conv
	Layers []*Dense
	Back   []*Conv
	// Plan is the ConvPlan the network was built with (nil for none).
	Plan *ConvPlan
}

// Bounds on the networks this package builds, checked before anything is
// allocated: a settings file that asks for more is refused, not obeyed.
// They are far above the small models quern is for (the reference VAE has
// 0.65 million parameters).
const (
	// MaxWidth is the most units in one layer.
	MaxWidth = 1 << 26
	// MaxLayers is the most layers in one network.
	MaxLayers = 256
	// MaxParams is the most weights and biases in one network.
	MaxParams = 1 << 28
)

// ErrConfig is wrapped by every configuration error from this package.
var ErrConfig = errors.New("layers: invalid configuration")

func (c MLPConfig) withDefaults() MLPConfig {
	if c.Name == "" {
		c.Name = "mlp"
	}
	if c.Hidden == Default {
		c.Hidden = ReLU
	}
	if c.LinearHidden {
		c.Hidden = Identity
	}
	if c.Output == Default {
		c.Output = Identity
	}
	if c.LeakySlope == 0 {
		c.LeakySlope = 0.01
	}
	if c.Conv != nil {
		p := c.Conv.withDefaults()
		p.Channels = append([]int(nil), p.Channels...)
		c.Conv = &p
	}
	return c
}

// Validate reports the first problem with the configuration.
func (c MLPConfig) Validate() error {
	c = c.withDefaults()
	if len(c.Widths) < 2 {
		return fmt.Errorf("%w: MLP %q needs at least 2 widths, got %v", ErrConfig, c.Name, c.Widths)
	}
	if len(c.Widths) > MaxLayers+1 {
		return fmt.Errorf("%w: MLP %q has %d layers, at most %d are built", ErrConfig, c.Name, len(c.Widths)-1, MaxLayers)
	}
	params := 0
	for i, w := range c.Widths {
		if w <= 0 || w > MaxWidth {
			return fmt.Errorf("%w: MLP %q width %d is %d, want 1..%d", ErrConfig, c.Name, i, w, MaxWidth)
		}
	}
	if c.Conv != nil {
		if err := c.validateConv(); err != nil {
			return err
		}
	} else {
		for i := 1; i < len(c.Widths); i++ {
			params += (c.Widths[i-1] + 1) * c.Widths[i]
			if params > MaxParams {
				return fmt.Errorf("%w: MLP %q has over %d parameters", ErrConfig, c.Name, MaxParams)
			}
		}
	}
	if !c.Hidden.Concrete() || !c.Output.Concrete() {
		return fmt.Errorf("%w: MLP %q has an unknown activation", ErrConfig, c.Name)
	}
	if c.Init > HeGlorot {
		return fmt.Errorf("%w: MLP %q has unknown init %d", ErrConfig, c.Name, c.Init)
	}
	if !(c.Dropout >= 0 && c.Dropout < 1) {
		return fmt.Errorf("%w: MLP %q dropout %v outside [0, 1)", ErrConfig, c.Name, c.Dropout)
	}
	if !(c.LeakySlope >= 0 && c.LeakySlope < 1) {
		return fmt.Errorf("%w: MLP %q leaky slope %v outside [0, 1)", ErrConfig, c.Name, c.LeakySlope)
	}
	if !c.Precision.Valid() {
		return fmt.Errorf("%w: MLP %q has unknown precision %d", ErrConfig, c.Name, c.Precision)
	}
	return nil
}

// NewMLP validates cfg and returns an MLP whose weights are drawn from rng.
// The same rng state always yields bitwise the same weights.
func NewMLP(cfg MLPConfig, rng *rand.Rand) (*MLP, error) {
	cfg = cfg.withDefaults()
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	if rng == nil {
		return nil, fmt.Errorf("%w: MLP %q needs a random generator", ErrConfig, cfg.Name)
	}
	m := &MLP{Name: cfg.Name, Plan: cfg.Conv}
	if p := cfg.Conv; p != nil && !p.Out {
		m.Front = newConvs(cfg.Name, *p, cfg.Hidden, cfg.Hidden, cfg.LeakySlope, cfg.Precision, rng)
	}
	widths := cfg.denseWidths()
	n := len(widths) - 1
	for i := 0; i < n; i++ {
		in, out := widths[i], widths[i+1]
		act, drop := cfg.Hidden, cfg.Dropout
		if i == n-1 {
			act, drop = cfg.Output, 0
			if cfg.Conv != nil && cfg.Conv.Out {
				act = cfg.Hidden
			}
		}
		d := &Dense{
			In: in, Out: out, Act: act, Slope: cfg.LeakySlope, Dropout: drop,
			W: NewParam(fmt.Sprintf("%s.%d.weight", cfg.Name, i), in, out, cfg.Precision),
			B: NewParam(fmt.Sprintf("%s.%d.bias", cfg.Name, i), 1, out, cfg.Precision),
		}
		init := cfg.Init
		if init == InitAuto || init == HeGlorot {
			init = GlorotUniform
			if act == ReLU || act == LeakyReLU || act == ELU {
				init = HeNormal
			}
		}
		switch init {
		case HeNormal:
			FillHeNormal(d.W, in, rng)
		case FanInUniform:
			FillFanInUniform(d.W, in, rng)
		default:
			FillGlorotUniform(d.W, in, out, rng)
		}
		m.Layers = append(m.Layers, d)
	}
	if p := cfg.Conv; p != nil && p.Out {
		m.Back = newConvs(cfg.Name, *p, cfg.Hidden, cfg.Output, cfg.LeakySlope, cfg.Precision, rng)
	}
	return m, nil
}

// In is the input width.
func (m *MLP) In() int {
	if len(m.Front) > 0 {
		return m.Front[0].In()
	}
	return m.Layers[0].In
}

// Out is the output width.
func (m *MLP) Out() int {
	if len(m.Back) > 0 {
		return m.Back[len(m.Back)-1].Out()
	}
	return m.Layers[len(m.Layers)-1].Out
}

// Precision is the precision of the MLP's parameters.
func (m *MLP) Precision() Precision { return m.Layers[0].W.prec }

// Params lists every parameter in layer order (weight then bias).
func (m *MLP) Params() []*Param {
	ps := make([]*Param, 0, 2*(len(m.Front)+len(m.Layers)+len(m.Back)))
	for _, c := range m.Front {
		ps = append(ps, c.W, c.B)
	}
	for _, d := range m.Layers {
		ps = append(ps, d.W, d.B)
	}
	for _, c := range m.Back {
		ps = append(ps, c.W, c.B)
	}
	return ps
}

// Freeze freezes or unfreezes every parameter of the MLP.
func (m *MLP) Freeze(f bool) {
	for _, p := range m.Params() {
		p.SetFrozen(f)
	}
}

// Workspace holds scratch buffers for graph-free forward passes. A
// Workspace must not be shared between goroutines; the MLP itself may be.
type Workspace struct {
	a32, b32 []float32
	a64, b64 []float64
	// patches of the convolutions
	cols32 []float32
	cols64 []float64
	fin    finish32
	// inputs converted to the network's precision (Run)
	in32 []float32
	in64 []float64
}

func grow[T any](s []T, n int) []T {
	if cap(s) < n {
		return make([]T, n)
	}
	return s[:n]
}

// Forward32 computes the network's output for rows inputs of width In()
// stored row-major in x, without any graph, and returns a slice of rows x
// Out() values that aliases ws (valid until ws is next used). It is safe to
// call from many goroutines as long as each uses its own Workspace and no
// one is training the MLP. It returns an error if x has the wrong length or
// the MLP is not float32.
func (m *MLP) Forward32(x []float32, rows int, ws *Workspace) ([]float32, error) {
	if len(m.Layers) == 0 || m.Layers[0].W.prec != Float32 {
		return nil, fmt.Errorf("layers: MLP %q: Forward32 on a non-float32 network", m.Name)
	}
	if rows < 0 || len(x) != rows*m.In() {
		return nil, fmt.Errorf("layers: MLP %q: input has %d values, want %d rows x %d", m.Name, len(x), rows, m.In())
	}
	cur, step := x, 0
	// next is the ping-pong buffer the next layer writes
	next := func(n int) []float32 {
		step++
		if step%2 == 1 {
			ws.a32 = grow(ws.a32, n)
			return ws.a32
		}
		ws.b32 = grow(ws.b32, n)
		return ws.b32
	}
	for _, c := range m.Front {
		dst := next(rows * c.Out())
		if rows > 0 {
			dst = convForward32(c, dst, cur, rows, ws)
		}
		cur = dst
	}
	for _, d := range m.Layers {
		dst := next(rows * d.Out)
		if rows > 0 {
			// the training graphs' matrix product; the bias and the
			// activation go on each block as it is finished
			f := &ws.fin
			f.c, f.b, f.ldc, f.act, f.slope = dst, d.B.v32, d.Out, d.Act, float32(d.Slope)
			gemm.SgemmThen(blas.NoTrans, blas.NoTrans, rows, d.Out, d.In, 1, cur, d.In, d.W.v32, d.Out, 0, dst, d.Out, f)
			f.c, f.b = nil, nil
		}
		cur = dst
	}
	for _, c := range m.Back {
		dst := next(rows * c.Out())
		if rows > 0 {
			dst = convForward32(c, dst, cur, rows, ws)
		}
		cur = dst
	}
	return cur, nil
}

// finish32 adds the bias b to finished blocks of c (ldc columns) and
// applies the activation (gemm.Finisher).
type finish32 struct {
	c, b  []float32
	ldc   int
	act   Activation
	slope float32
}

func (f *finish32) Finish(i0, i1, j0, j1 int) {
	b := f.b[j0:j1]
	for i := i0; i < i1; i++ {
		row := f.c[i*f.ldc+j0 : i*f.ldc+j1]
		done := vec.Add(row, b)
		for j := done; j < len(row); j++ {
			row[j] += b[j]
		}
		applyInPlace32(f.act, row, f.slope)
	}
}

// Forward64 is Forward32 for float64 networks.
func (m *MLP) Forward64(x []float64, rows int, ws *Workspace) ([]float64, error) {
	if len(m.Layers) == 0 || m.Layers[0].W.prec != Float64 {
		return nil, fmt.Errorf("layers: MLP %q: Forward64 on a non-float64 network", m.Name)
	}
	if rows < 0 || len(x) != rows*m.In() {
		return nil, fmt.Errorf("layers: MLP %q: input has %d values, want %d rows x %d", m.Name, len(x), rows, m.In())
	}
	cur, step := x, 0
	next := func(n int) []float64 {
		step++
		if step%2 == 1 {
			ws.a64 = grow(ws.a64, n)
			return ws.a64
		}
		ws.b64 = grow(ws.b64, n)
		return ws.b64
	}
	for _, c := range m.Front {
		dst := next(rows * c.Out())
		if rows > 0 {
			dst = convForward64(c, dst, cur, rows, ws)
		}
		cur = dst
	}
	for _, d := range m.Layers {
		dst := next(rows * d.Out)
		affine(dst, cur, d.W.v64, d.B.v64, rows, d.In, d.Out)
		applyInPlace64(d.Act, dst, d.Slope)
		cur = dst
	}
	for _, c := range m.Back {
		dst := next(rows * c.Out())
		if rows > 0 {
			dst = convForward64(c, dst, cur, rows, ws)
		}
		cur = dst
	}
	return cur, nil
}

// affine computes dst = x w + b for x (rows x in), w (in x out), b (out)
// (Forward64; float32 networks use gemm).
// Rows are taken four at a time so that each row of w is loaded once per
// block; zero inputs (common after ReLU) are skipped.
func affine(dst, x, w, b []float64, rows, in, out int) {
	r := 0
	for ; r+4 <= rows; r += 4 {
		d0 := dst[r*out : (r+1)*out]
		d1 := dst[(r+1)*out : (r+2)*out]
		d2 := dst[(r+2)*out : (r+3)*out]
		d3 := dst[(r+3)*out : (r+4)*out]
		copy(d0, b)
		copy(d1, b)
		copy(d2, b)
		copy(d3, b)
		x0 := x[r*in : (r+1)*in]
		x1 := x[(r+1)*in : (r+2)*in]
		x2 := x[(r+2)*in : (r+3)*in]
		x3 := x[(r+3)*in : (r+4)*in]
		for k := 0; k < in; k++ {
			a0, a1, a2, a3 := x0[k], x1[k], x2[k], x3[k]
			if a0 == 0 && a1 == 0 && a2 == 0 && a3 == 0 {
				continue
			}
			wk := w[k*out : (k+1)*out]
			wk = wk[:len(d0)]
			d1 := d1[:len(wk)]
			d2 := d2[:len(wk)]
			d3 := d3[:len(wk)]
			for j, wv := range wk {
				d0[j] += a0 * wv
				d1[j] += a1 * wv
				d2[j] += a2 * wv
				d3[j] += a3 * wv
			}
		}
	}
	for ; r < rows; r++ {
		d := dst[r*out : (r+1)*out]
		copy(d, b)
		xr := x[r*in : (r+1)*in]
		for k, xv := range xr {
			if xv == 0 {
				continue
			}
			wk := w[k*out : (k+1)*out]
			wk = wk[:len(d)]
			for j, wv := range wk {
				d[j] += xv * wv
			}
		}
	}
}
