package optim

import (
	"encoding/json"
	"math"
	"os"
	"testing"

	"github.com/quernlab/quern/layers"
	"github.com/stretchr/testify/require"
)

// trajectories.json is written by testdata/optim/make_golden.py with
// torch.optim from Debian's python3-torch 1.13 in float64.
type run struct {
	Func         string             `json:"func"`
	Name         string             `json:"name"`
	Optimizer    string             `json:"optimizer"`
	Config       map[string]any     `json:"config"`
	Schedule     string             `json:"schedule"`
	ScheduleArgs map[string]float64 `json:"schedule_args"`
	Start        []float64          `json:"start"`
	Trajectory   [][]float64        `json:"trajectory"`
}

type goldenFile struct {
	Runs []run `json:"runs"`
	Clip []struct {
		MaxNorm float64   `json:"max_norm"`
		Norm    float64   `json:"norm"`
		G1      []float64 `json:"g1"`
		G2      []float64 `json:"g2"`
	} `json:"clip"`
}

func load(t *testing.T) goldenFile {
	b, err := os.ReadFile("../testdata/optim/trajectories.json")
	require.NoError(t, err)
	var g goldenFile
	require.NoError(t, json.Unmarshal(b, &g))
	require.NotEmpty(t, g.Runs)
	return g
}

// gradients of the test functions, written out by hand.
func gradQuadratic(w, g []float64) {
	// f = 0.5 w'Aw - b'w with A = [[3, .5], [.5, 1]], b = [1, -2]
	g[0] = 3*w[0] + 0.5*w[1] - 1
	g[1] = 0.5*w[0] + w[1] + 2
}

func gradRosenbrock(w, g []float64) {
	// f = (1-x)^2 + 100 (y-x^2)^2
	x, y := w[0], w[1]
	g[0] = -2*(1-x) - 400*x*(y-x*x)
	g[1] = 200 * (y - x*x)
}

func num(c map[string]any, k string) float64 {
	if v, ok := c[k].(float64); ok {
		return v
	}
	return 0
}

func build(t *testing.T, r run) Optimizer {
	c := r.Config
	var sched Schedule
	switch r.Schedule {
	case "step":
		sched = StepDecay{Every: int(r.ScheduleArgs["step_size"]), Gamma: r.ScheduleArgs["gamma"]}
	case "cosine":
		sched = Cosine{Steps: int(r.ScheduleArgs["T_max"]), Min: r.ScheduleArgs["eta_min"] / num(c, "lr")}
	}
	var o Optimizer
	var err error
	switch r.Optimizer {
	case "SGD":
		nest, _ := c["nesterov"].(bool)
		o, err = NewSGD(SGDConfig{Rate: num(c, "lr"), Momentum: num(c, "momentum"), Dampening: num(c, "dampening"), Nesterov: nest, WeightDecay: num(c, "weight_decay"), Schedule: sched})
	case "Adam", "AdamW":
		ac := AdamConfig{Rate: num(c, "lr"), Epsilon: num(c, "eps"), WeightDecay: num(c, "weight_decay"), Schedule: sched}
		if betas, ok := c["betas"].([]any); ok {
			ac.Beta1, ac.Beta2 = betas[0].(float64), betas[1].(float64)
		}
		if r.Optimizer == "Adam" {
			o, err = NewAdam(ac)
		} else {
			if _, set := c["weight_decay"]; !set {
				ac.WeightDecay = 0.01
			}
			o, err = NewAdamW(ac)
		}
	case "RMSprop":
		o, err = NewRMSprop(RMSpropConfig{Rate: num(c, "lr"), Momentum: num(c, "momentum"), WeightDecay: num(c, "weight_decay"), Schedule: sched})
	default:
		t.Fatalf("unknown optimizer %s", r.Optimizer)
	}
	require.NoError(t, err)
	return o
}

func TestTrajectoriesMatchReference(t *testing.T) {
	for _, r := range load(t).Runs {
		t.Run(r.Func+"/"+r.Name, func(t *testing.T) {
			o := build(t, r)
			p := layers.NewParam("w", 1, 2, layers.Float64)
			copy(p.F64(), r.Start)
			grad := gradQuadratic
			if r.Func == "rosenbrock" {
				grad = gradRosenbrock
			}
			for i, want := range r.Trajectory {
				grad(p.F64(), p.Grad64())
				require.NoError(t, o.Update([]*layers.Param{p}))
				for j := range want {
					// 1e-6 relative (1e-9 absolute floor near zero), as
					// asked of the optimisers against torch.optim.
					tol := 1e-6*math.Abs(want[j]) + 1e-9
					require.InDelta(t, want[j], p.F64()[j], tol, "step %d coordinate %d", i+1, j)
				}
			}
			require.Equal(t, len(r.Trajectory), o.Steps())
		})
	}
}

func TestClipGlobalNormMatchesReference(t *testing.T) {
	for _, c := range load(t).Clip {
		p1 := layers.NewParam("a", 1, 3, layers.Float64)
		p2 := layers.NewParam("b", 2, 2, layers.Float64)
		copy(p1.Grad64(), []float64{1, -2, 3})
		copy(p2.Grad64(), []float64{0.5, -0.5, 4, 0.25})
		norm := ClipGlobalNorm([]*layers.Param{p1, p2}, c.MaxNorm)
		// torch.nn.utils.clip_grad_norm_ (Debian python3-torch 1.13).
		require.InDelta(t, c.Norm, norm, 1e-12)
		require.InDeltaSlice(t, c.G1, p1.Grad64(), 1e-12)
		require.InDeltaSlice(t, c.G2, p2.Grad64(), 1e-12)
	}
}
