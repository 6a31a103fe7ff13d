package layers

import (
	"fmt"
	"math"
	"math/rand/v2"
)

// Init chooses how a dense layer's weights are drawn. Biases start at zero.
type Init uint8

const (
	// InitAuto is the default of whatever is built: for an MLPConfig,
	// HeGlorot; a model kind may document another.
	InitAuto Init = iota
	// GlorotUniform draws U(-a, a) with a = sqrt(6/(fanIn+fanOut))
	// (Glorot & Bengio 2010, eq. 16).
	GlorotUniform
	// HeNormal draws N(0, 2/fanIn) (He et al. 2015, section 2.2).
	HeNormal
	// FanInUniform draws U(-a, a) with a = 1/sqrt(fanIn), every layer
	// alike: a standard deviation of 1/sqrt(3 fanIn), a third of the
	// variance of LeCun et al.'s fanIn^(-1/2) ("Efficient BackProp",
	// 1998, section 4.6). The VAE's default: on Fashion-MNIST its
	// 784-400-20 model reached a 0.5% lower test negative ELBO after 10
	// epochs than with HeGlorot (README).
	FanInUniform
	// HeGlorot picks HeNormal before ReLU-like activations (ReLU, leaky
	// ReLU, ELU) and GlorotUniform otherwise, layer by layer.
	HeGlorot
)

// String names the scheme.
func (in Init) String() string {
	switch in {
	case InitAuto:
		return "auto"
	case GlorotUniform:
		return "glorot_uniform"
	case HeNormal:
		return "he_normal"
	case FanInUniform:
		return "fan_in_uniform"
	case HeGlorot:
		return "he_glorot"
	}
	return fmt.Sprintf("Init(%d)", uint8(in))
}

// MarshalText writes the scheme's name.
func (in Init) MarshalText() ([]byte, error) {
	if in > HeGlorot {
		return nil, fmt.Errorf("layers: unknown init %d", uint8(in))
	}
	return []byte(in.String()), nil
}

// UnmarshalText reads a scheme's name; its number in decimal text ("3")
// is accepted too.
func (in *Init) UnmarshalText(b []byte) error {
	for c := InitAuto; c <= HeGlorot; c++ {
		if string(b) == c.String() || string(b) == fmt.Sprint(uint8(c)) {
			*in = c
			return nil
		}
	}
	return fmt.Errorf("layers: unknown init %q", b)
}

// GlorotBound is the half-width sqrt(6/(fanIn+fanOut)) of the Glorot
// uniform distribution.
func GlorotBound(fanIn, fanOut int) float64 { return math.Sqrt(6 / float64(fanIn+fanOut)) }

// HeStd is the standard deviation sqrt(2/fanIn) of the He normal distribution.
func HeStd(fanIn int) float64 { return math.Sqrt(2 / float64(fanIn)) }

// FillGlorotUniform fills p with draws from the Glorot uniform distribution
// for a fanIn x fanOut weight matrix.
func FillGlorotUniform(p *Param, fanIn, fanOut int, rng *rand.Rand) {
	a := GlorotBound(fanIn, fanOut)
	for i := 0; i < p.Len(); i++ {
		p.SetAt(i, (2*rng.Float64()-1)*a)
	}
}

// FillFanInUniform fills p with draws from U(-a, a), a = 1/sqrt(fanIn).
func FillFanInUniform(p *Param, fanIn int, rng *rand.Rand) {
	a := 1 / math.Sqrt(float64(fanIn))
	for i := 0; i < p.Len(); i++ {
		p.SetAt(i, (2*rng.Float64()-1)*a)
	}
}

// FillHeNormal fills p with draws from N(0, 2/fanIn).
func FillHeNormal(p *Param, fanIn int, rng *rand.Rand) {
	s := HeStd(fanIn)
	for i := 0; i < p.Len(); i++ {
		p.SetAt(i, rng.NormFloat64()*s)
	}
}

// DropoutMask fills mask with inverted-dropout multipliers: 0 with
// probability rate and 1/(1-rate) otherwise, so that the expected value of
// each multiplier is 1. rate must lie in [0, 1).
func DropoutMask[T float32 | float64](mask []T, rate float64, rng *rand.Rand) {
	keep := T(1 / (1 - rate))
	for i := range mask {
		if rng.Float64() < rate {
			mask[i] = 0
		} else {
			mask[i] = keep
		}
	}
}
