package train

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"

	"github.com/quernlab/quern/data"
)

// StreamSettings say how RunStream walks a streamed table.
type StreamSettings struct {
	// Buffer is the rows of the shuffle buffer. Default
	// DefaultShuffleBuffer.
	Buffer int
}

// DefaultShuffleBuffer is the rows a stream's shuffle buffer holds by
// default: 64 Ki rows (8.5 MiB for rows of 34 values).
const DefaultShuffleBuffer = 1 << 16

// RunStream trains on a table read from its file on every epoch, never
// held: s's training rows, through a shuffle buffer of set.Buffer rows,
// and, at the end of each epoch, its validation rows (none when s has
// none). The scaler is fitted on every training row (from the stream's
// first pass). A batch is drawn from the rows of the next stretch of the
// file the buffer spans, not from the whole file: a file sorted by time
// or by group trains on a sliding window of it, so give a buffer as
// large as memory allows, or shuffle the file once beforehand. For a
// seed and a file the run is the same, bit for bit, at any thread count.
// Not for GANs, labelled rows or tables with categories or missing cells
// (data.OpenStream refuses the last two).
func (t *Trainer) RunStream(ctx context.Context, s *data.Stream, set StreamSettings) (*History, error) {
	if set.Buffer < 0 {
		return t.history, fmt.Errorf("%w: a shuffle buffer of %d rows", ErrConfig, set.Buffer)
	}
	if set.Buffer == 0 {
		set.Buffer = DefaultShuffleBuffer
	}
	if _, ok := t.r.(*ganRecipe); ok {
		return t.history, fmt.Errorf("%w: a GAN trains on a table in memory, not a stream", ErrConfig)
	}
	if s == nil || s.TrainRows == 0 {
		return t.history, fmt.Errorf("%w: no training rows", ErrConfig)
	}
	if t.s.Patience > 0 && s.ValRows == 0 {
		return t.history, fmt.Errorf("%w: early stopping (patience %d) needs validation rows", ErrConfig, t.s.Patience)
	}
	// the rows' ranges stand in for the rows where prepare looks at
	// them, and the scaler is fitted on the stream's statistics
	if _, _, err := t.r.prepare(s.Bounds(data.TrainRows), s.Bounds(data.ValRows)); err != nil {
		return t.history, fmt.Errorf("%w (of the streamed rows' range: row 1 stands for each column's least value, row 2 for its greatest)", err)
	}
	l := &loop{r: t.r, s: t.s, shuffle: rand.New(t.shuffle), seed: t.seed, h: t.history, mid: &t.midEpoch, best: &t.best}
	src := &streamSource{s: s, size: t.s.BatchSize, buffer: min(set.Buffer, s.TrainRows), rng: l.shuffle}
	var val valSource
	if s.ValRows > 0 {
		val = streamVal{s}
	}
	err := l.runFrom(ctx, src, val)
	return t.history, err
}

// streamSource draws an epoch's batches from a pass over the training
// rows: each row read replaces a row of the buffer drawn at random, which
// joins the batch being made; at the end the buffer empties in a random
// order. A goroutine reads and shuffles ahead of the steps, a batch or
// two at most.
type streamSource struct {
	s            *data.Stream
	size, buffer int
	rng          *rand.Rand
	batches      chan []float32
	free         chan []float32
	done         chan struct{} // closed to stop the reader
	err          error         // the reader's, read after batches closes
	buf          []float32     // the shuffle buffer, kept from epoch to epoch
}

func (m *streamSource) rows() int      { return m.s.TrainRows }
func (m *streamSource) cols() int      { return m.s.Cols }
func (m *streamSource) labelled() bool { return false }
func (m *streamSource) len() int       { return (m.s.TrainRows + m.size - 1) / m.size }

// errStopped ends a reader that is no longer wanted.
var errStopped = errors.New("stopped")

func (m *streamSource) epoch() error {
	m.close()
	cols := m.s.Cols
	m.batches, m.free, m.done = make(chan []float32, 2), make(chan []float32, 3), make(chan struct{})
	for range 3 {
		m.free <- make([]float32, m.size*cols)
	}
	m.err = nil
	if m.buf == nil {
		m.buf = make([]float32, m.buffer*cols)
	}
	batches, free, done := m.batches, m.free, m.done
	go func() {
		defer close(batches)
		buf := m.buf // the last epoch's reader has ended (close waits for it)
		filled := 0
		cur, k := <-free, 0
		emit := func(row []float32) error {
			copy(cur[k*cols:(k+1)*cols], row)
			k++
			if k == m.size {
				select {
				case batches <- cur:
				case <-done:
					return errStopped
				}
				select {
				case cur = <-free:
				case <-done:
					return errStopped
				}
				k = 0
			}
			return nil
		}
		err := m.s.EachShuffled(data.TrainRows, m.rng, func(x []float32, rows int) error {
			for r := range rows {
				row := x[r*cols : (r+1)*cols]
				if filled < m.buffer {
					copy(buf[filled*cols:], row)
					filled++
					continue
				}
				j := m.rng.IntN(m.buffer)
				if err := emit(buf[j*cols : (j+1)*cols]); err != nil {
					return err
				}
				copy(buf[j*cols:(j+1)*cols], row)
			}
			return nil
		})
		for err == nil && filled > 0 {
			j := m.rng.IntN(filled)
			err = emit(buf[j*cols : (j+1)*cols])
			copy(buf[j*cols:(j+1)*cols], buf[(filled-1)*cols:filled*cols])
			filled--
		}
		if err == nil && k > 0 {
			select {
			case batches <- cur[:k*cols]:
			case <-done:
			}
		}
		if err != nil && !errors.Is(err, errStopped) {
			m.err = err
		}
	}()
	return nil
}

func (m *streamSource) next(x []float32, _ []int) (int, error) {
	b, ok := <-m.batches
	if !ok {
		// the reader has ended: its error, if any, is set
		return 0, m.err
	}
	n := len(b) / m.s.Cols
	copy(x, b)
	m.free <- b[:cap(b)]
	return n, nil
}

// close stops a reader still running and waits for it.
func (m *streamSource) close() {
	if m.done == nil {
		return
	}
	close(m.done)
	for range m.batches {
	}
	m.done = nil
}

// streamVal gives a stream's validation rows in evaluation batches.
type streamVal struct{ s *data.Stream }

func (v streamVal) rows() int { return v.s.ValRows }
func (v streamVal) cols() int { return v.s.Cols }

func (v streamVal) each(f func(x []float32, labels []int, rows int) error) error {
	cols := v.s.Cols
	buf := make([]float32, 0, evalBatch*cols)
	err := v.s.Each(data.ValRows, func(x []float32, rows int) error {
		for rows > 0 {
			take := min(rows, evalBatch-len(buf)/cols)
			buf = append(buf, x[:take*cols]...)
			x, rows = x[take*cols:], rows-take
			if len(buf) == evalBatch*cols {
				if err := f(buf, nil, evalBatch); err != nil {
					return err
				}
				buf = buf[:0]
			}
		}
		return nil
	})
	if err == nil && len(buf) > 0 {
		err = f(buf, nil, len(buf)/cols)
	}
	return err
}
