package train

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/optim"
)

// batch is the mini-batch the loop hands to a step: Rows rows of Cols
// values in X (row-major) and, when the data have labels, one label per
// row. The slices are reused between steps.
type batch struct {
	Rows, Cols int
	X          []float32
	Labels     []int
}

// A move is one kind of update within a step: fill a program of its phase
// with the batch, run it, clip the gradients, let the optimiser update the
// parameters the program differentiates. A step runs each of a recipe's
// moves in order, each Times times; a GAN's alternation of discriminator
// and generator updates is two moves.
type move struct {
	Phase *engine.Phase
	Opt   optim.Optimizer
	Times int
	// Before runs before repetition k (may be nil).
	Before func(k int)
	// Fill writes repetition k's inputs.
	Fill func(p *engine.Program, b *batch, k int) error
	// After reads the run's outputs (may be nil).
	After func(p *engine.Program, loss float64)
}

// evaluation is how a recipe is evaluated on validation rows: batches of
// evalBatch rows (Trim cuts each to a usable size) filled and run through
// Phase, each giving the values of Names, averaged over the rows.
type evaluation struct {
	Phase *engine.Phase
	Names []string
	Trim  func(rows int) int
	// Fill writes a batch of validation rows; rng draws the noise of the
	// pass, from a generator made afresh for each pass.
	Fill func(p *engine.Program, x []float32, labels []int, rows int, rng *rand.Rand)
	// Read appends the batch's metric values (loss first) to dst.
	Read func(p *engine.Program, loss float64, dst []float64) []float64
}

// evalBatch is the number of rows per evaluation batch.
const evalBatch = 256

// recipe is what a model kind contributes to training: its graphs (the
// moves of a step and the evaluation), how a batch fills them, the
// figures it reports, and any training state of its own. The loop below
// runs every kind's recipe.
type recipe interface {
	// params lists the model's parameters, for best-weight snapshots.
	params() []*layers.Param
	// prepare checks the data, fits the model's scaler the first time,
	// and returns the scaled training and validation rows.
	prepare(trainSet, valSet *data.Dataset) (*data.Dataset, *data.Dataset, error)
	// moves are the updates of one step, in order.
	moves() []*move
	// usable is the number of a batch's rows a step uses (0 skips the
	// step).
	usable(rows int) int
	// metrics returns the step's figures after its moves, loss first.
	metrics() []Metric
	// evaluation describes a validation pass.
	evaluation() *evaluation
	// optimizers names each optimiser by the prefix of its state's
	// tensors in checkpoints.
	optimizers() map[string]optim.Optimizer
	// state and restore carry the recipe's own training state (nil: none)
	// through checkpoints.
	state() any
	restore(raw []byte) error
	// release frees the compiled graphs.
	release()
}

// loop is one call of Trainer.Run.
type loop struct {
	r       recipe
	s       Settings
	shuffle *rand.Rand
	seed    uint64
	h       *History
	// mid is set while an epoch is under way: weights, optimiser and
	// generators have moved past what the history records.
	mid *bool
	// best holds the best epoch's weights (with early stopping), kept by
	// the trainer across runs and checkpoints.
	best *[][]float64
	// evalHook, when set (tests), replaces the evaluation pass.
	evalHook func() []Metric
	// scaler scales rows on their way into the graphs (nil: none);
	// evalBuf holds an evaluation batch's scaled rows.
	scaler  *data.Scaler
	evalBuf []float32
}

func (l *loop) run(ctx context.Context, trainSet, valSet *data.Dataset) error {
	if trainSet == nil || trainSet.Rows == 0 {
		return fmt.Errorf("%w: no training rows", ErrConfig)
	}
	if valSet != nil && valSet.Cols != trainSet.Cols {
		return fmt.Errorf("%w: validation has %d columns, training %d", ErrConfig, valSet.Cols, trainSet.Cols)
	}
	batches, err := data.NewBatches(trainSet, data.BatchConfig{Size: l.s.BatchSize}, l.shuffle)
	if err != nil {
		return err
	}
	var val valSource
	if valSet != nil {
		val = memVal{valSet}
	}
	return l.runFrom(ctx, &memSource{b: batches, d: trainSet}, val)
}

// runFrom is run on any source of batches and validation rows.
func (l *loop) runFrom(ctx context.Context, src rowSource, valSet valSource) error {
	s, h, r := l.s, l.h, l.r
	if l.mid == nil {
		l.mid = new(bool)
	}
	if l.best == nil {
		l.best = new([][]float64)
	}
	if s.Patience > 0 && valSet == nil {
		return fmt.Errorf("%w: early stopping needs validation rows", ErrConfig)
	}
	defer src.close()
	params := r.params()
	best := *l.best
	if best == nil && h.BestEpoch > 0 && s.Patience > 0 && !s.KeepLast {
		// resumed from a checkpoint that did not keep the best weights
		// (written before they were kept): the current ones stand in
		// until an epoch improves on the recorded best
		best = snapshot(params)
		*l.best = best
	}
	// a batch holds at most the rows there are, whatever the batch size
	// rows are scaled a batch at a time, as they are copied into it
	var sc *data.Scaler
	if sr, ok := r.(scalesRows); ok {
		sc = sr.rowScaler()
	}
	l.scaler = sc
	rows := min(s.BatchSize, src.rows())
	b := batch{Cols: src.cols(), X: make([]float32, rows*src.cols())}
	if src.labelled() {
		b.Labels = make([]int, rows)
	}
	var bb batch // the step's rows (declared once: a step allocates nothing)
	moves := r.moves()
	clip := s.Optimizer.ClipNorm
	start := time.Now()
	samples := 0
	// the pace, and so the time left, counts only this call's steps
	steps := src.len() // an epoch's
	totalSteps := (s.Epochs - len(h.Epochs)) * steps
	doneSteps := 0
	var ms []Metric
	for epoch := len(h.Epochs) + 1; epoch <= s.Epochs; epoch++ {
		*l.mid = true
		if err := src.epoch(); err != nil {
			return fmt.Errorf("train: epoch %d: %w", epoch, err)
		}
		var sums []Metric
		used := 0 // rows the epoch's steps trained on
		for i := 0; ; i++ {
			if err := ctx.Err(); err != nil {
				return err
			}
			n, err := src.next(b.X, b.Labels)
			if err != nil {
				return fmt.Errorf("train: epoch %d step %d: %w", epoch, i+1, err)
			}
			if n == 0 {
				break
			}
			b.Rows = n
			var lab []int
			if b.Labels != nil {
				lab = b.Labels[:b.Rows]
			}
			if sc != nil {
				sc.ApplyRows(b.X[:b.Rows*b.Cols])
			}
			use := r.usable(b.Rows)
			if use > 0 {
				bb = batch{Rows: use, Cols: b.Cols, X: b.X[:use*b.Cols], Labels: lab}
				if err := l.step(moves, &bb, clip); err != nil {
					if errors.Is(err, engine.ErrNonFinite) {
						return &NonFiniteError{Epoch: epoch, Step: i + 1, Err: err}
					}
					if ctx.Err() != nil {
						return ctx.Err()
					}
					return fmt.Errorf("train: epoch %d step %d: %w", epoch, i+1, err)
				}
				ms = r.metrics()
				for _, m := range ms {
					if math.IsNaN(m.Value) || math.IsInf(m.Value, 0) {
						return &NonFiniteError{Epoch: epoch, Step: i + 1, Err: fmt.Errorf("%s is %v: %w", m.Name, m.Value, engine.ErrNonFinite)}
					}
				}
				if sums == nil {
					sums = make([]Metric, len(ms))
					for k, m := range ms {
						sums[k].Name = m.Name
					}
				}
				for k, m := range ms {
					if k < len(sums) {
						sums[k].Value += m.Value * float64(use)
					}
				}
				used += use
			}
			samples += b.Rows
			doneSteps++
			if s.OnStep != nil {
				s.OnStep(progress(epoch, s.Epochs, i+1, steps, ms, nil, samples, start, doneSteps, totalSteps, false))
			}
		}
		if used == 0 || len(sums) == 0 {
			return fmt.Errorf("train: epoch %d ran no step: %d training rows are fewer than one step uses", epoch, src.rows())
		}
		for k := range sums {
			sums[k].Value /= float64(used)
		}
		rec := EpochRecord{Train: sums}
		if valSet != nil {
			vm, err := l.evaluate(valSet)
			if err != nil {
				if errors.Is(err, engine.ErrNonFinite) {
					return &NonFiniteError{Epoch: epoch, Step: steps, Err: fmt.Errorf("validation: %w", err)}
				}
				return fmt.Errorf("train: epoch %d validation: %w", epoch, err)
			}
			rec.Validation = vm
		}
		h.Epochs = append(h.Epochs, rec)
		*l.mid = false
		loss := rec.Train[0].Value
		if len(rec.Validation) > 0 {
			loss = rec.Validation[0].Value
		}
		if h.BestEpoch == 0 || loss < h.BestLoss-s.MinDelta {
			h.BestEpoch, h.BestLoss, h.sinceBest = epoch, loss, 0
			if s.Patience > 0 && !s.KeepLast {
				best = snapshotInto(best, params)
				*l.best = best // a checkpoint from OnEpoch holds it
			}
		} else {
			h.sinceBest++
		}
		if s.OnEpoch != nil {
			if err := s.OnEpoch(progress(epoch, s.Epochs, steps, steps, rec.Train, rec.Validation, samples, start, doneSteps, totalSteps, true), h); err != nil {
				return err
			}
		}
		if s.Patience > 0 && h.sinceBest >= s.Patience {
			h.StoppedEarly = true
			break
		}
	}
	if s.Patience > 0 && !s.KeepLast && best != nil && h.BestEpoch != len(h.Epochs) {
		if err := restore(params, best); err != nil {
			return err
		}
		h.Restored = true
	}
	return nil
}

// step runs a step's moves on one batch.
func (l *loop) step(moves []*move, b *batch, clip float64) error {
	for _, mv := range moves {
		for k := 0; k < mv.Times; k++ {
			if mv.Before != nil {
				mv.Before(k)
			}
			p, err := mv.Phase.Program(b.Rows)
			if err != nil {
				return err
			}
			if err := mv.Fill(p, b, k); err != nil {
				return err
			}
			loss, err := p.Run(engine.RunOptions{})
			if err != nil {
				return err
			}
			if clip > 0 {
				optim.ClipGlobalNorm(p.Params(), clip)
			}
			if err := mv.Opt.Update(p.Params()); err != nil {
				return err
			}
			if mv.After != nil {
				mv.After(p, loss)
			}
		}
	}
	return nil
}

// evaluate averages the recipe's evaluation metrics over the validation
// rows (scaled), in batches of evalBatch, with the noise of the pass
// drawn from a generator seeded afresh, so that repeated evaluations
// agree.
func (l *loop) evaluate(d valSource) ([]Metric, error) {
	if l.evalHook != nil {
		return l.evalHook(), nil
	}
	ev := l.r.evaluation()
	rng := rand.New(rand.NewPCG(l.seed, stream.Evaluation))
	sums := make([]float64, len(ev.Names))
	var vals []float64
	total := 0
	err := d.each(func(x []float32, lab []int, n int) error {
		if ev.Trim != nil {
			n = ev.Trim(n)
		}
		if n == 0 {
			return nil
		}
		p, err := ev.Phase.Program(n)
		if err != nil {
			return err
		}
		if lab != nil {
			lab = lab[:n]
		}
		x = x[:n*d.cols()]
		if l.scaler != nil {
			l.evalBuf = append(l.evalBuf[:0], x...)
			l.scaler.ApplyRows(l.evalBuf)
			x = l.evalBuf
		}
		ev.Fill(p, x, lab, n, rng)
		loss, err := p.Run(engine.RunOptions{})
		if err != nil {
			return err
		}
		vals = ev.Read(p, loss, vals[:0])
		for i, v := range vals {
			sums[i] += v * float64(n)
		}
		total += n
		return nil
	})
	if err != nil {
		return nil, err
	}
	if total == 0 {
		return nil, fmt.Errorf("no validation batch: %d rows are too few", d.rows())
	}
	out := make([]Metric, len(sums))
	for i, v := range sums {
		out[i] = Metric{Name: ev.Names[i], Value: v / float64(total)}
	}
	return out, nil
}

// rowSource is where the loop takes an epoch's batches from: an
// in-memory table (memSource) or a file streamed (streamSource).
type rowSource interface {
	rows() int // training rows
	cols() int
	labelled() bool
	// len is the number of batches in an epoch.
	len() int
	// epoch starts an epoch, its rows in a new order.
	epoch() error
	// next writes the next batch into x and labels (each sized for a
	// whole batch) and returns its rows; 0 when the epoch is over.
	next(x []float32, labels []int) (int, error)
	close()
}

// valSource gives the validation rows, evalBatch rows at a time.
type valSource interface {
	rows() int
	cols() int
	each(f func(x []float32, labels []int, rows int) error) error
}

// memSource walks a Dataset's shuffled batches.
type memSource struct {
	b *data.Batches
	d *data.Dataset
	i int
}

func (m *memSource) rows() int      { return m.d.Rows }
func (m *memSource) cols() int      { return m.d.Cols }
func (m *memSource) labelled() bool { return m.d.Labels != nil }
func (m *memSource) len() int       { return m.b.Len() }
func (m *memSource) close()         {}

func (m *memSource) epoch() error {
	m.b.Shuffle()
	m.i = 0
	return nil
}

func (m *memSource) next(x []float32, labels []int) (int, error) {
	if m.i >= m.b.Len() {
		return 0, nil
	}
	n := m.b.Rows(m.i)
	var lab []int
	if labels != nil {
		lab = labels[:n]
	}
	m.b.Gather(m.i, x[:n*m.d.Cols], lab)
	m.i++
	return n, nil
}

// memVal is a Dataset's validation rows in order.
type memVal struct{ d *data.Dataset }

func (m memVal) rows() int { return m.d.Rows }
func (m memVal) cols() int { return m.d.Cols }

func (m memVal) each(f func(x []float32, labels []int, rows int) error) error {
	d := m.d
	for start := 0; start < d.Rows; start += evalBatch {
		n := min(evalBatch, d.Rows-start)
		var lab []int
		if d.Labels != nil {
			lab = d.Labels[start : start+n]
		}
		if err := f(d.X[start*d.Cols:(start+n)*d.Cols], lab, n); err != nil {
			return err
		}
	}
	return nil
}

func progress(epoch, epochs, step, steps int, ms, val []Metric, samples int, start time.Time, done, total int, end bool) Progress {
	el := time.Since(start)
	p := Progress{Epoch: epoch, Epochs: epochs, Step: step, Steps: steps, Metrics: ms, Validation: val, Elapsed: el, EpochEnd: end}
	if s := el.Seconds(); s > 0 {
		p.SamplesPerSec = float64(samples) / s
	}
	if done > 0 && total > done {
		p.Remaining = time.Duration(float64(el) * float64(total-done) / float64(done))
	}
	return p
}

func snapshot(ps []*layers.Param) [][]float64 { return snapshotInto(nil, ps) }

func snapshotInto(dst [][]float64, ps []*layers.Param) [][]float64 {
	if dst == nil {
		dst = make([][]float64, len(ps))
	}
	for i, p := range ps {
		if dst[i] == nil {
			dst[i] = make([]float64, p.Len())
		}
		for j := range dst[i] {
			dst[i][j] = p.At(j)
		}
	}
	return dst
}

func restore(ps []*layers.Param, snap [][]float64) error {
	for i, p := range ps {
		if err := p.SetValues(snap[i]); err != nil {
			return fmt.Errorf("train: restoring the best weights: %w", err)
		}
	}
	return nil
}
