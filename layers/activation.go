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
