package gradcheck

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
)

// Floor is the smallest denominator used for relative errors, so that
// gradients that are zero (or nearly so) are compared absolutely at that
// scale. Common practice, no source.
const Floor = 1e-4

// Result is the worst disagreement found.
type Result struct {
	MaxRelErr float64
	Param     string
	Index     int
	Analytic  float64
	Numeric   float64
}

func (r Result) String() string {
	return fmt.Sprintf("max relative error %.3g at %s[%d]: analytic %.10g, numeric %.10g", r.MaxRelErr, r.Param, r.Index, r.Analytic, r.Numeric)
}

// Check builds the graph once with gradients for the float64 params, then
// perturbs every parameter element w by +/-s and +/-2s, with the step
// s = h*max(|w|, 0.1), and compares the
// engine's gradient with the five-point central difference
// (-f(w+2s) + 8f(w+s) - 8f(w-s) + f(w-2s)) / 12s. f is ref when given (an independent
// float64 reference of the same function), else the graph's own forward.
func Check(params []*layers.Param, build func(g *engine.Graph) *engine.Node, ref func() float64, h float64) (Result, error) {
	for _, p := range params {
		if p.Precision() != layers.Float64 {
			return Result{}, fmt.Errorf("gradcheck: %q is not float64", p.Name())
		}
	}
	g := engine.NewGraph(layers.Float64)
	loss := build(g)
	for _, p := range params {
		g.Param(p) // make sure every param is in the graph
	}
	prog, err := g.Compile(loss, engine.CompileOptions{Grad: true})
	if err != nil {
		return Result{}, err
	}
	defer prog.Close()
	f := ref
	if f == nil {
		f = func() float64 {
			v, err2 := prog.Run(engine.RunOptions{})
			if err2 != nil {
				err = err2
			}
			return v
		}
	}
	if _, err := prog.Run(engine.RunOptions{}); err != nil {
		return Result{}, err
	}
	analytic := map[*layers.Param][]float64{}
	for _, p := range params {
		analytic[p] = append([]float64(nil), p.Grad64()...)
	}
	var res Result
	for _, p := range params {
		w := p.F64()
		for i := range w {
			orig := w[i]
			h := h * math.Max(math.Abs(orig), 0.1) // relative step, floored
			eval := func(d float64) float64 { w[i] = orig + d; return f() }
			// Five-point central stencil: truncation error O(h^4), so a
			// larger h keeps rounding error small too.
			num := (-eval(2*h) + 8*eval(h) - 8*eval(-h) + eval(-2*h)) / (12 * h)
			w[i] = orig
			if err != nil {
				return res, err
			}
			a := analytic[p][i]
			rel := math.Abs(a-num) / math.Max(Floor, math.Max(math.Abs(a), math.Abs(num)))
			if rel > res.MaxRelErr || math.IsNaN(rel) {
				res = Result{MaxRelErr: rel, Param: p.Name(), Index: i, Analytic: a, Numeric: num}
			}
		}
	}
	return res, nil
}
