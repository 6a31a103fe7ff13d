package optim

import "math"

// Schedule gives the factor by which the base learning rate is multiplied
// at update number step (0 for the first update).
type Schedule interface {
	Factor(step int) float64
}

// StepDecay multiplies the rate by Gamma every Every updates.
type StepDecay struct {
	Every int
	Gamma float64
}

// Factor is Gamma^(step/Every).
func (s StepDecay) Factor(step int) float64 {
	if s.Every <= 0 {
		return 1
	}
	return math.Pow(s.Gamma, float64(step/s.Every))
}

// Cosine anneals the factor from 1 to Min over Steps updates along half a
// cosine, then holds Min: Min + (1-Min)(1+cos(pi*step/Steps))/2.
type Cosine struct {
	Steps int
	Min   float64
}

// Factor implements Schedule.
func (c Cosine) Factor(step int) float64 {
	if c.Steps <= 0 || step >= c.Steps {
		return c.Min
	}
	return c.Min + (1-c.Min)*(1+math.Cos(math.Pi*float64(step)/float64(c.Steps)))/2
}

// Warmup raises the factor linearly from 1/Steps to 1 over the first Steps
// updates, then follows Then (constant 1 when nil), counting from the end
// of the warm-up.
type Warmup struct {
	Steps int
	Then  Schedule
}

// Factor implements Schedule.
func (w Warmup) Factor(step int) float64 {
	if step < w.Steps {
		return float64(step+1) / float64(w.Steps)
	}
	if w.Then == nil {
		return 1
	}
	return w.Then.Factor(step - w.Steps)
}
