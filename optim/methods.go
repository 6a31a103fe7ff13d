package optim

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/internal/kernel/par"
	"github.com/quernlab/quern/layers"
)

// base holds what every method shares: the base rate, its schedule and the
// update count.
type base struct {
	kind  string
	lr    float64
	sched Schedule
	steps int
	st    store
}

func (b *base) Steps() int { return b.steps }

func (b *base) Rate() float64 {
	if b.sched == nil {
		return b.lr
	}
	return b.lr * b.sched.Factor(b.steps)
}

func (b *base) Export() *State {
	return &State{Kind: b.kind, Steps: b.steps, Slots: b.st.export()}
}

func (b *base) Import(s *State) error {
	if s == nil || s.Kind != b.kind {
		k := "<nil>"
		if s != nil {
			k = s.Kind
		}
		return fmt.Errorf("optim: cannot restore %s state into %s", k, b.kind)
	}
	if s.Steps < 0 {
		return fmt.Errorf("optim: restored step count %d", s.Steps)
	}
	if err := b.st.importSlots(b.kind, s.Slots); err != nil {
		return err
	}
	b.steps = s.Steps
	return nil
}

// kernel applies one method's update to a parameter of either precision.
type kernel interface {
	k32(p *layers.Param, s *slots[float32])
	k64(p *layers.Param, s *slots[float64])
}

// each runs k on every trainable parameter, then counts the step. Passing
// the optimiser itself as k keeps Update free of allocations.
func (b *base) each(params []*layers.Param, k kernel) error {
	for _, p := range params {
		if p.Frozen() {
			continue
		}
		switch p.Precision() {
		case layers.Float32:
			s, err := b.st.get32(p)
			if err != nil {
				return err
			}
			k.k32(p, s)
			s.fresh = false
		case layers.Float64:
			s, err := b.st.get64(p)
			if err != nil {
				return err
			}
			k.k64(p, s)
			s.fresh = false
		}
	}
	b.steps++
	return nil
}

// SGDConfig configures stochastic gradient descent. Zero fields mean: no
// momentum, no weight decay, no schedule.
type SGDConfig struct {
	// Rate is the learning rate, > 0. Required.
	Rate float64
	// Momentum in [0, 1); 0 disables the velocity buffer.
	Momentum float64
	// Dampening in [0, 1) scales the gradient's contribution to the
	// velocity after the first step.
	Dampening float64
	// Nesterov uses the look-ahead form g + momentum*v; needs Momentum > 0
	// and Dampening 0.
	Nesterov bool
	// WeightDecay adds WeightDecay*w to the gradient (L2 regularisation).
	WeightDecay float64
	// Schedule multiplies Rate per step; nil means constant.
	Schedule Schedule
}

// SGD is gradient descent with optional (Nesterov) momentum:
// v = momentum*v + (1-dampening)*g (v = g on the first step), then
// w -= rate*(g + momentum*v) with Nesterov or w -= rate*v without.
type SGD struct {
	base
	cfg SGDConfig
	lr  float64
}

// NewSGD validates cfg and returns the optimiser.
func NewSGD(cfg SGDConfig) (*SGD, error) {
	if err := positive("SGD rate", cfg.Rate); err != nil {
		return nil, err
	}
	if err := inUnit("SGD momentum", cfg.Momentum); err != nil {
		return nil, err
	}
	if err := inUnit("SGD dampening", cfg.Dampening); err != nil {
		return nil, err
	}
	if err := nonNeg("SGD weight decay", cfg.WeightDecay); err != nil {
		return nil, err
	}
	if cfg.Nesterov && (cfg.Momentum == 0 || cfg.Dampening != 0) {
		return nil, fmt.Errorf("%w: Nesterov needs momentum > 0 and no dampening", ErrConfig)
	}
	n := 0
	if cfg.Momentum > 0 {
		n = 1
	}
	return &SGD{base: base{kind: "sgd", lr: cfg.Rate, sched: cfg.Schedule, st: newStore(n)}, cfg: cfg}, nil
}

// Update applies one step.
func (o *SGD) Update(params []*layers.Param) error {
	o.lr = o.Rate()
	return o.each(params, o)
}

func (o *SGD) k32(p *layers.Param, s *slots[float32]) {
	c := o.cfg
	sgdKernel(p.F32(), p.Grad32(), s.a, float32(o.lr), float32(c.Momentum), float32(c.Dampening), float32(c.WeightDecay), c.Nesterov, s.fresh)
}

func (o *SGD) k64(p *layers.Param, s *slots[float64]) {
	c := o.cfg
	sgdKernel(p.F64(), p.Grad64(), s.a, o.lr, c.Momentum, c.Dampening, c.WeightDecay, c.Nesterov, s.fresh)
}

func sgdKernel[T float32 | float64](w, g, v []T, lr, mom, damp, wd T, nesterov, first bool) {
	for i := range w {
		gi := g[i] + wd*w[i]
		if v != nil {
			if first {
				v[i] = gi
			} else {
				v[i] = mom*v[i] + (1-damp)*gi
			}
			if nesterov {
				gi += mom * v[i]
			} else {
				gi = v[i]
			}
		}
		w[i] -= lr * gi
	}
}

// AdamConfig configures Adam and AdamW. Zero fields take the defaults
// Beta1 0.9, Beta2 0.999, Epsilon 1e-8, no weight decay, no schedule; a
// negative Beta1 asks for 0 (no momentum).
type AdamConfig struct {
	// Rate is the learning rate, > 0. Required.
	Rate    float64
	Beta1   float64
	Beta2   float64
	Epsilon float64
	// WeightDecay: for Adam, added to the gradient as WeightDecay*w; for
	// AdamW, applied directly to the weights as w -= rate*WeightDecay*w.
	WeightDecay float64
	Schedule    Schedule
}

func (c AdamConfig) withDefaults() AdamConfig {
	switch {
	case c.Beta1 == 0:
		c.Beta1 = 0.9
	case c.Beta1 < 0:
		c.Beta1 = 0
	}
	if c.Beta2 == 0 {
		c.Beta2 = 0.999
	}
	if c.Epsilon == 0 {
		c.Epsilon = 1e-8
	}
	return c
}

// Adam is Adam with bias correction (Kingma & Ba 2015, Algorithm 1):
// m = b1 m + (1-b1) g; v = b2 v + (1-b2) g^2;
// w -= rate * (m/(1-b1^t)) / (sqrt(v/(1-b2^t)) + eps).
// With Decoupled set (see NewAdamW) weight decay is applied to the
// weights before the step (Loshchilov & Hutter 2019, Algorithm 2).
type Adam struct {
	base
	cfg       AdamConfig
	decoupled bool
	k         adamCoef
}

// NewAdam validates cfg and returns Adam with coupled (L2) weight decay.
func NewAdam(cfg AdamConfig) (*Adam, error) { return newAdam(cfg, false) }

// NewAdamW validates cfg and returns Adam with decoupled weight decay.
func NewAdamW(cfg AdamConfig) (*Adam, error) { return newAdam(cfg, true) }

func newAdam(cfg AdamConfig, decoupled bool) (*Adam, error) {
	cfg = cfg.withDefaults()
	if err := positive("Adam rate", cfg.Rate); err != nil {
		return nil, err
	}
	if err := inUnit("Adam beta1", cfg.Beta1); err != nil {
		return nil, err
	}
	if err := inUnit("Adam beta2", cfg.Beta2); err != nil {
		return nil, err
	}
	if err := positive("Adam epsilon", cfg.Epsilon); err != nil {
		return nil, err
	}
	if err := nonNeg("Adam weight decay", cfg.WeightDecay); err != nil {
		return nil, err
	}
	kind := "adam"
	if decoupled {
		kind = "adamw"
	}
	return &Adam{base: base{kind: kind, lr: cfg.Rate, sched: cfg.Schedule, st: newStore(2)}, cfg: cfg, decoupled: decoupled}, nil
}

// Update applies one step.
func (o *Adam) Update(params []*layers.Param) error {
	lr := o.Rate()
	c := o.cfg
	t := float64(o.steps + 1)
	bc1 := 1 - math.Pow(c.Beta1, t)
	bc2 := 1 - math.Pow(c.Beta2, t)
	o.k = adamCoef{lr: lr, b1: c.Beta1, b2: c.Beta2, eps: c.Epsilon, wd: c.WeightDecay, bc1: bc1, sbc2: math.Sqrt(bc2), decoupled: o.decoupled}
	return o.each(params, o)
}

func (o *Adam) k32(p *layers.Param, s *slots[float32]) {
	w, g := p.F32(), p.Grad32()
	if !par.Worth(len(w)) {
		adam32Fast(w, g, s.a, s.b, o.k)
		return
	}
	k := o.k
	par.For(len(w), func(lo, hi int) { adam32Fast(w[lo:hi], g[lo:hi], s.a[lo:hi], s.b[lo:hi], k) })
}
func (o *Adam) k64(p *layers.Param, s *slots[float64]) {
	adamKernel(p.F64(), p.Grad64(), s.a, s.b, o.k)
}

type adamCoef struct {
	lr, b1, b2, eps, wd, bc1, sbc2 float64
	decoupled                      bool
}

func adamKernel[T float32 | float64](w, g, m, v []T, k adamCoef) {
	b1, b2 := T(k.b1), T(k.b2)
	eps, wd := T(k.eps), T(k.wd)
	step := T(k.lr / k.bc1)
	sbc2 := T(k.sbc2)
	decay := T(1 - k.lr*k.wd)
	for i := range w {
		gi := g[i]
		if k.decoupled {
			w[i] *= decay
		} else if wd != 0 {
			gi += wd * w[i]
		}
		m[i] = b1*m[i] + (1-b1)*gi
		v[i] = b2*v[i] + (1-b2)*gi*gi
		denom := T(math.Sqrt(float64(v[i])))/sbc2 + eps
		w[i] -= step * m[i] / denom
	}
}

// adam32 is adamKernel for float32 written out with hoisted constants and
// slices resliced to one length, so that the compiler drops bounds checks;
// it is the hot loop of every float32 training step.
func adam32(w, g, m, v []float32, k adamCoef) {
	b1, b2 := float32(k.b1), float32(k.b2)
	c1, c2 := 1-b1, 1-b2
	eps, wd := float32(k.eps), float32(k.wd)
	step := float32(k.lr / k.bc1)
	inv := float32(1 / k.sbc2)
	decay := float32(1 - k.lr*k.wd)
	g, m, v = g[:len(w)], m[:len(w)], v[:len(w)]
	for i := range w {
		gi := g[i]
		wi := w[i]
		if k.decoupled {
			wi *= decay
		} else if wd != 0 {
			gi += wd * wi
		}
		mi := b1*m[i] + c1*gi
		vi := b2*v[i] + c2*gi*gi
		m[i], v[i] = mi, vi
		w[i] = wi - step*mi/(float32(math.Sqrt(float64(vi)))*inv+eps)
	}
}

// RMSpropConfig configures RMSprop. Zero fields take the defaults Alpha
// 0.99, Epsilon 1e-8, no momentum, no weight decay, no schedule.
type RMSpropConfig struct {
	// Rate is the learning rate, > 0. Required.
	Rate        float64
	Alpha       float64
	Epsilon     float64
	Momentum    float64
	WeightDecay float64
	Schedule    Schedule
}

// RMSprop divides the gradient by a running root mean square:
// s = alpha s + (1-alpha) g^2; w -= rate * g / (sqrt(s) + eps), or with
// momentum b = momentum*b + g/(sqrt(s)+eps); w -= rate*b.
type RMSprop struct {
	base
	cfg RMSpropConfig
	lr  float64
}

// NewRMSprop validates cfg and returns the optimiser.
func NewRMSprop(cfg RMSpropConfig) (*RMSprop, error) {
	if cfg.Alpha == 0 {
		cfg.Alpha = 0.99
	}
	if cfg.Epsilon == 0 {
		cfg.Epsilon = 1e-8
	}
	if err := positive("RMSprop rate", cfg.Rate); err != nil {
		return nil, err
	}
	if err := inUnit("RMSprop alpha", cfg.Alpha); err != nil {
		return nil, err
	}
	if err := positive("RMSprop epsilon", cfg.Epsilon); err != nil {
		return nil, err
	}
	if err := inUnit("RMSprop momentum", cfg.Momentum); err != nil {
		return nil, err
	}
	if err := nonNeg("RMSprop weight decay", cfg.WeightDecay); err != nil {
		return nil, err
	}
	return &RMSprop{base: base{kind: "rmsprop", lr: cfg.Rate, sched: cfg.Schedule, st: newStore(2)}, cfg: cfg}, nil
}

// Update applies one step.
func (o *RMSprop) Update(params []*layers.Param) error {
	o.lr = o.Rate()
	return o.each(params, o)
}

func (o *RMSprop) k32(p *layers.Param, s *slots[float32]) {
	c := o.cfg
	rmsKernel(p.F32(), p.Grad32(), s.a, s.b, float32(o.lr), float32(c.Alpha), float32(c.Epsilon), float32(c.Momentum), float32(c.WeightDecay))
}

func (o *RMSprop) k64(p *layers.Param, s *slots[float64]) {
	c := o.cfg
	rmsKernel(p.F64(), p.Grad64(), s.a, s.b, o.lr, c.Alpha, c.Epsilon, c.Momentum, c.WeightDecay)
}

func rmsKernel[T float32 | float64](w, g, sq, buf []T, lr, alpha, eps, mom, wd T) {
	for i := range w {
		gi := g[i] + wd*w[i]
		sq[i] = alpha*sq[i] + (1-alpha)*gi*gi
		d := gi / (T(math.Sqrt(float64(sq[i]))) + eps)
		if mom > 0 {
			buf[i] = mom*buf[i] + d
			d = buf[i]
		}
		w[i] -= lr * d
	}
}

// ClipGlobalNorm scales the gradients of all trainable params by
// maxNorm/(norm+1e-6) when their joint L2 norm exceeds maxNorm, and returns
// the norm before clipping.
func ClipGlobalNorm(params []*layers.Param, maxNorm float64) float64 {
	var ss float64
	for _, p := range params {
		if p.Frozen() {
			continue
		}
		for _, g := range p.Grad32() {
			ss += float64(g) * float64(g)
		}
		for _, g := range p.Grad64() {
			ss += g * g
		}
	}
	norm := math.Sqrt(ss)
	if norm <= maxNorm {
		return norm
	}
	f := maxNorm / (norm + 1e-6)
	for _, p := range params {
		if p.Frozen() {
			continue
		}
		g32 := p.Grad32()
		for i := range g32 {
			g32[i] *= float32(f)
		}
		g64 := p.Grad64()
		for i := range g64 {
			g64[i] *= f
		}
	}
	return norm
}
