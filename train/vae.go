package train

import (
	"fmt"
	"math/rand/v2"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/losses"
	"github.com/quernlab/quern/optim"
	"github.com/quernlab/quern/vae"
)

// vaeRecipe trains a VAE on its Variational objective.
type vaeRecipe struct {
	m     *vae.Model
	c     vae.Config
	obj   Variational
	noise *rand.Rand
	opt   optim.Optimizer

	x, eps, beta *engine.Input
	// a table's likelihood (nil inputs otherwise): mask is 1 where the
	// Gaussian scores an input (not a category's level, not a missing
	// cell), cat the categories' one-hot levels, the cross-entropy's
	// targets
	mask, cat *engine.Input
	missing   []missingRule
	catHalf   []float32
	// inCat marks the categories' levels and the missing-cell
	// indicators: inputs the Gaussian leaves out
	inCat []bool
	// isLevel marks the categories' levels and the booleans (the inputs
	// the cat input holds 0/1 targets for), isBool the booleans, whose
	// Bernoulli terms boolMask says where to take
	isLevel               []bool
	isBool                []bool
	boolMask              *engine.Input
	trainPhase, evalPhase *engine.Phase
	step                  *move
	metric                []Metric
}

func newVAERecipe(m *vae.Model, s Settings, noise *rand.Rand) (*vaeRecipe, error) {
	opt, err := newOptimizer(s.Optimizer, s.Optimizer.Rate, s.Optimizer.Schedule)
	if err != nil {
		return nil, err
	}
	r := &vaeRecipe{m: m, c: m.Config(), obj: s.Objective.(Variational), noise: noise, opt: opt,
		x: engine.NewInput("x"), eps: engine.NewInput("eps"), beta: engine.NewInput("beta")}
	r.step = &move{Opt: opt, Times: 1}
	var beta float64
	r.step.Fill = func(p *engine.Program, b *batch, _ int) error {
		beta = r.obj.Beta * r.obj.Schedule.Factor(r.opt.Steps())
		r.fill(p, b.X, r.noise, beta)
		return nil
	}
	r.step.After = func(p *engine.Program, loss float64) {
		r.metric = append(r.metric[:0],
			Metric{Name: "loss", Value: loss},
			Metric{Name: "reconstruction", Value: outputScalar(p, 0)},
			Metric{Name: "kl", Value: outputScalar(p, 1)},
			Metric{Name: "beta", Value: beta})
	}
	return r, nil
}

func (r *vaeRecipe) params() []*layers.Param { return r.m.Params() }

func (r *vaeRecipe) rowScaler() *data.Scaler { return rowScaler(r.m.Scaler) }

func (r *vaeRecipe) prepare(trainSet, valSet *data.Dataset) (*data.Dataset, *data.Dataset, error) {
	if err := checkWidth("vae", r.c.Inputs, trainSet, valSet); err != nil {
		return nil, nil, err
	}
	tr, va, err := scale("vae", &r.m.Scaler, r.c.Scaling, trainSet, valSet)
	if err != nil {
		return nil, nil, err
	}
	if r.m.Columns == nil {
		r.m.Columns, r.m.Image, r.m.Encoding = trainSet.Columns, trainSet.Image, trainSet.Encoding
	}
	if r.c.Likelihood == vae.Bernoulli {
		for _, d := range []*data.Dataset{tr, va} {
			if d == nil {
				continue
			}
			var bad error
			row := 0
			scaledRowsDo(d, r.rowScaler(), func(x []float32, n int) {
				for i, v := range x {
					if bad == nil && (v < 0 || v > 1) {
						bad = fmt.Errorf("vae: row %d column %d is %v after scaling; a Bernoulli likelihood needs values in [0, 1]", row+i/d.Cols+1, i%d.Cols+1, v)
					}
				}
				row += n
			})
			if bad != nil {
				return nil, nil, bad
			}
		}
	}
	if r.trainPhase == nil {
		hasBool := false
		if r.c.Table {
			r.missing = missingRules(r.m.Encoding, r.m.Scaler, r.c.Inputs)
			if enc := r.m.Encoding; enc != nil && enc.Width() == r.c.Inputs && r.c.Booleans == vae.Bernoulli {
				r.isBool = make([]bool, r.c.Inputs)
				for j, f := range enc.Owners() {
					if enc.Fields[f].Type == data.Boolean && !enc.Indicators()[j] {
						r.isBool[j], hasBool = true, true
					}
				}
			}
		}
		if len(r.c.Categories) > 0 || len(r.missing) > 0 || hasBool {
			r.mask = engine.NewInput("mask")
			r.inCat = make([]bool, r.c.Inputs)
			for _, sp := range r.c.Categories {
				for j := sp[0]; j < sp[1]; j++ {
					r.inCat[j] = true
				}
			}
			for _, m := range r.missing {
				r.inCat[m.indicator] = true
			}
			for j, b := range r.isBool {
				r.inCat[j] = r.inCat[j] || b
			}
		}
		if len(r.c.Categories) > 0 || hasBool {
			r.isLevel = make([]bool, r.c.Inputs)
			for _, sp := range r.c.Categories {
				for j := sp[0]; j < sp[1]; j++ {
					r.isLevel[j] = true
				}
			}
			for j, b := range r.isBool {
				r.isLevel[j] = r.isLevel[j] || b
			}
			r.cat = engine.NewInput("categories")
			r.catHalf = scaledHalf(r.m.Scaler, r.c.Inputs)
		}
		if hasBool {
			r.boolMask = engine.NewInput("booleans")
		}
		r.trainPhase = engine.NewPhase(r.c.Precision, true, r.build(true))
		r.evalPhase = engine.NewPhase(r.c.Precision, false, r.build(false))
		r.step.Phase = r.trainPhase
	}
	return tr, va, nil
}

// reconstruction is the per-row negative log-likelihood of x under the
// decoder output out, averaged over rows.
func (r *vaeRecipe) reconstruction(g *engine.Graph, out, x *engine.Node) *engine.Node {
	if r.mask != nil {
		// a table's likelihood: the Gaussian where the mask says, the
		// categories' cross-entropy, both summed per row, averaged
		n := x.Rows()
		var lv *engine.Node
		variance := 0.0
		if r.m.LogVar != nil {
			lv = g.Param(r.m.LogVar)
		} else {
			lv, variance = out, r.c.OutputVariance
		}
		nll := losses.GraphGaussianNLLMasked(g, x, out, lv, g.Input(r.mask, n, r.c.Inputs), variance)
		var cat *engine.Node
		if r.cat != nil {
			cat = g.Input(r.cat, n, r.c.Inputs)
		}
		if len(r.c.Categories) > 0 {
			nll = g.Add(nll, losses.GraphGroupedSoftmaxCE(g, out, cat, r.c.Categories))
		}
		if r.boolMask != nil {
			// a boolean's Bernoulli: the decoder's output its log-odds
			nll = g.Add(nll, losses.GraphBernoulliNLLMasked(g, out, cat, g.Input(r.boolMask, n, r.c.Inputs)))
		}
		return nll
	}
	switch r.c.Likelihood {
	case vae.Gaussian:
		return losses.GraphGaussianNLLFixed(g, x, out, r.c.OutputVariance)
	case vae.GaussianLearned:
		return losses.GraphGaussianNLLColumns(g, x, out, g.Param(r.m.LogVar))
	case vae.GaussianShared:
		return losses.GraphGaussianNLLShared(g, x, out, g.Param(r.m.LogVar))
	}
	// one fused sum: no element-wise losses, no broadcast gradient
	return losses.GraphBernoulliNLL(g, out, x)
}

// build is the training graph (the beta-weighted objective, free bits) or
// the evaluation graph (the negative ELBO) for n rows; both also output
// the reconstruction and KL terms.
func (r *vaeRecipe) build(trainMode bool) engine.BuildFunc {
	c, obj := r.c, r.obj
	L := c.Latent
	return func(g *engine.Graph, n int) (*engine.Node, []*engine.Node) {
		x := g.Input(r.x, n, c.Inputs)
		eps := g.Input(r.eps, n, L)
		h := g.MLP(r.m.Encoder, x, nil)
		mu, lv := g.Slice(h, 0, L), g.Slice(h, L, 2*L)
		z := g.Reparameterise(mu, lv, eps)
		out := g.MLP(r.m.Decoder, z, nil)
		recon := r.reconstruction(g, out, x)
		kl := losses.GraphKLStdNormal(g, mu, lv)
		if !trainMode {
			return g.Add(recon, kl), []*engine.Node{recon, kl}
		}
		klTerm := kl
		if obj.FreeBits > 0 {
			klTerm = losses.GraphKLFreeBits(g, mu, lv, obj.FreeBits)
		}
		beta := g.Input(r.beta, 1, 1)
		return g.Add(recon, g.Mul(klTerm, g.Sum(beta))), []*engine.Node{recon, kl}
	}
}

// fill writes the rows, fresh standard normal noise and beta.
func (r *vaeRecipe) fill(p *engine.Program, x []float32, rng *rand.Rand, beta float64) {
	if r.mask != nil {
		d := r.c.Inputs
		if r.cat != nil && p.Has(r.cat) {
			setInput(p, r.cat, func(i int) float64 {
				if j := i % d; r.isLevel[j] && x[i] > r.catHalf[j] {
					return 1
				}
				return 0
			})
		}
		missingAt := func(row, j int) bool {
			for _, m := range r.missing {
				if j >= m.from && j < m.to && x[row*d+m.indicator] > m.above {
					return true
				}
			}
			return false
		}
		setInput(p, r.mask, func(i int) float64 {
			row, j := i/d, i%d
			if r.inCat[j] || missingAt(row, j) {
				return 0
			}
			return 1
		})
		if r.boolMask != nil && p.Has(r.boolMask) {
			setInput(p, r.boolMask, func(i int) float64 {
				row, j := i/d, i%d
				if r.isBool[j] && !missingAt(row, j) {
					return 1
				}
				return 0
			})
		}
	}
	if r.c.Precision == layers.Float64 {
		x64 := p.F64(r.x)
		for i, v := range x {
			x64[i] = float64(v)
		}
		for i, e := 0, p.F64(r.eps); i < len(e); i++ {
			e[i] = rng.NormFloat64()
		}
		setScalar(p, r.beta, beta)
		return
	}
	copy(p.F32(r.x), x)
	for i, e := 0, p.F32(r.eps); i < len(e); i++ {
		e[i] = float32(rng.NormFloat64())
	}
	setScalar(p, r.beta, beta)
}

func (r *vaeRecipe) moves() []*move           { return []*move{r.step} }
func (r *vaeRecipe) usable(rows int) int      { return rows }
func (r *vaeRecipe) metrics() []Metric        { return r.metric }
func (r *vaeRecipe) state() any               { return nil }
func (r *vaeRecipe) restore(raw []byte) error { return nil }

func (r *vaeRecipe) optimizers() map[string]optim.Optimizer {
	return map[string]optim.Optimizer{singleOptimizer: r.opt}
}

// evaluation is the negative ELBO (beta 1, no free bits) with its
// reconstruction and KL parts, each averaged per row, with one
// reparameterised sample per row.
func (r *vaeRecipe) evaluation() *evaluation {
	return &evaluation{Phase: r.evalPhase, Names: []string{"loss", "reconstruction", "kl"},
		Fill: func(p *engine.Program, x []float32, _ []int, _ int, rng *rand.Rand) { r.fill(p, x, rng, 1) },
		Read: func(p *engine.Program, loss float64, dst []float64) []float64 {
			return append(dst, loss, outputScalar(p, 0), outputScalar(p, 1))
		}}
}

func (r *vaeRecipe) release() {
	if r.trainPhase != nil {
		r.trainPhase.Close()
		r.evalPhase.Close()
		r.trainPhase, r.evalPhase, r.step.Phase = nil, nil, nil
	}
}
