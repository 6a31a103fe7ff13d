package layers

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/internal/kernel/vec"
)

// Activation is an element-wise non-linearity applied after an affine layer.
type Activation uint8

const (
	// Default, the zero value, stands for the default activation of
	// whatever it configures (documented there); every other value asks
	// for itself, so Identity can be asked for.
	Default Activation = iota
	// Identity leaves its input unchanged.
	Identity
	// ReLU is max(0, x).
	ReLU
	// LeakyReLU is x for x >= 0 and slope*x otherwise.
	LeakyReLU
	// ELU is x for x > 0 and exp(x)-1 otherwise (alpha = 1).
	ELU
	// Tanh is the hyperbolic tangent.
	Tanh
	// Sigmoid is 1/(1+exp(-x)).
	Sigmoid
	// Softplus is log(1+exp(x)), computed stably.
	Softplus
	numActivations
)

var activationNames = [...]string{"default", "identity", "relu", "leaky_relu", "elu", "tanh", "sigmoid", "softplus"}

// String returns the activation's lower-case name.
func (a Activation) String() string {
	if a < numActivations {
		return activationNames[a]
	}
	return fmt.Sprintf("Activation(%d)", uint8(a))
}

// Valid reports whether a is a known activation (Default included).
func (a Activation) Valid() bool { return a < numActivations }

// Concrete reports whether a is a known activation other than Default:
// what a layer can apply.
func (a Activation) Concrete() bool { return a > Default && a < numActivations }

// ParseActivation maps a name produced by String back to its Activation.
func ParseActivation(s string) (Activation, error) {
	for i, n := range activationNames {
		if n == s {
			return Activation(i), nil
		}
	}
	return Default, fmt.Errorf("layers: unknown activation %q (want one of %v)", s, activationNames[1:])
}

// Eval applies the activation to x in float64; slope is used by LeakyReLU.
func (a Activation) Eval(x, slope float64) float64 {
	switch a {
	case ReLU:
		if x > 0 {
			return x
		}
		return 0
	case LeakyReLU:
		if x >= 0 {
			return x
		}
		return slope * x
	case ELU:
		if x > 0 {
			return x
		}
		return math.Expm1(x)
	case Tanh:
		return math.Tanh(x)
	case Sigmoid:
		return sigmoid64(x)
	case Softplus:
		return softplus64(x)
	}
	return x
}

// Deriv is the derivative of the activation at x (the subgradient 0 is used
// for ReLU at 0).
func (a Activation) Deriv(x, slope float64) float64 {
	switch a {
	case ReLU:
		if x > 0 {
			return 1
		}
		return 0
	case LeakyReLU:
		if x >= 0 {
			return 1
		}
		return slope
	case ELU:
		if x > 0 {
			return 1
		}
		return math.Exp(x)
	case Tanh:
		t := math.Tanh(x)
		return 1 - t*t
	case Sigmoid:
		s := sigmoid64(x)
		return s * (1 - s)
	case Softplus:
		return sigmoid64(x)
	}
	return 1
}

func sigmoid64(x float64) float64 {
	if x >= 0 {
		return 1 / (1 + math.Exp(-x))
	}
	e := math.Exp(x)
	return e / (1 + e)
}

func softplus64(x float64) float64 {
	// log(1+exp(x)) = max(x,0) + log1p(exp(-|x|)): finite for any finite x.
	return math.Max(x, 0) + math.Log1p(math.Exp(-math.Abs(x)))
}

// applyInPlace32 applies a to every element of v in float32, with the
// functions the training graphs use (package vec), so that the graph-free
// passes give the graphs' values; ELU, which the graphs compose from other
// operations, goes through float64.
func applyInPlace32(a Activation, v []float32, slope float32) {
	switch a {
	case Identity:
	case ReLU:
		vec.ApplyLeaky(v, v, nil, 0)
	case LeakyReLU:
		vec.ApplyLeaky(v, v, nil, slope)
	case Tanh:
		vec.ApplyTanh(v, v)
	case Sigmoid:
		vec.ApplySigmoid(v, v)
	case Softplus:
		vec.ApplySoftplus(v, v)
	default:
		for i, x := range v {
			v[i] = float32(a.Eval(float64(x), float64(slope)))
		}
	}
}

func applyInPlace64(a Activation, v []float64, slope float64) {
	if a == Identity {
		return
	}
	for i, x := range v {
		v[i] = a.Eval(x, slope)
	}
}

// MarshalText writes the activation's name.
func (a Activation) MarshalText() ([]byte, error) {
	if !a.Valid() {
		return nil, fmt.Errorf("layers: unknown activation %d", uint8(a))
	}
	return []byte(a.String()), nil
}

// UnmarshalText reads a name written by MarshalText.
func (a *Activation) UnmarshalText(b []byte) error {
	v, err := ParseActivation(string(b))
	if err != nil {
		return err
	}
	*a = v
	return nil
}

// ApplyActivation applies a to every value of v in place with the
// graph-free passes' own functions; the training graph's fused
// convolutions call it too, so that the two agree bit for bit.
func ApplyActivation[T float32 | float64](a Activation, v []T, slope float64) {
	switch v := any(v).(type) {
	case []float32:
		applyInPlace32(a, v, float32(slope))
	case []float64:
		applyInPlace64(a, v, slope)
	}
}

// ActivationGrad multiplies each gradient g[i] in place by the
// derivative of a where it gave out[i]: every activation here has a
// derivative that its output determines (leaky ReLU and ReLU by the
// output's sign: in float32 -0, which the vector pass gives below zero,
// takes the slope, in float64 ReLU's 0 has derivative 0 as in Deriv; tanh
// 1-out^2; sigmoid out(1-out); ELU 1 above zero and out+1 below; softplus
// 1-exp(-out)).
func ActivationGrad[T float32 | float64](a Activation, g, out []T, slope float64) {
	out = out[:len(g)]
	switch a {
	case Identity:
		return
	case ReLU, LeakyReLU:
		if a == ReLU {
			slope = 0
		}
		if g32, ok := any(g).([]float32); ok {
			vec.ApplyLeaky(g32, any(out).([]float32), g32, float32(slope))
			return
		}
		// float64 passes (Eval) give +0 below zero for ReLU and keep
		// x at 0 for leaky ReLU: its derivative there is 1
		for i, o := range out {
			if o < 0 || (a == ReLU && o == 0) {
				g[i] *= T(slope)
			}
		}
	case Tanh:
		for i, o := range out {
			g[i] *= 1 - o*o
		}
	case Sigmoid:
		for i, o := range out {
			g[i] *= o * (1 - o)
		}
	case ELU:
		for i, o := range out {
			if o <= 0 {
				g[i] *= o + 1
			}
		}
	case Softplus:
		for i, o := range out {
			g[i] *= T(-math.Expm1(-float64(o)))
		}
	}
}
