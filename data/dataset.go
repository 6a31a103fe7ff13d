package data

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
)

// Unlabelled marks a row without a label in Dataset.Labels.
const Unlabelled = -1

// ErrConfig is wrapped by configuration errors.
var ErrConfig = errors.New("data: invalid configuration")

// Dataset is an in-memory table of float32 rows with optional integer
// labels. X holds Rows*Cols values row-major.
type Dataset struct {
	Rows, Cols int
	X          []float32
	// Labels is nil or has one entry per row: a class index >= 0, or
	// Unlabelled.
	Labels []int
	// Columns names the columns (nil when unknown).
	Columns []string
	// Image is the height, width and channels of image rows (nil for
	// tabular data); Cols = H*W*C with channels interleaved.
	Image []int
	// Kept holds, for a CSV file read with CSVConfig.Keep, the text of
	// those columns, row by row (Rows x len(KeptColumns) cells), to be
	// passed through to an output beside each row (an identifier, a
	// timestamp). Split, SplitInPlace and Subset leave it behind.
	Kept        []string
	KeptColumns []string
	// Encoding, for a table read by type (CSVConfig.Typed or Encoding),
	// says how the file's columns became these (then Columns names the
	// inputs: see Encoding.Columns); nil for a table of numbers read as
	// they are. Split and Subset keep it.
	Encoding *Encoding
	// Notes are what reading rows by an encoding found worth saying, in
	// row order (a cell filled in, an unseen level, an unscorable row).
	// Split and Subset leave them behind.
	Notes []RowNote
	// Skipped lists the lines of training rows left out for having no
	// observed cell.
	Skipped []int
	// LeftOut says, for each column a typed reading inferred to be an
	// identifier or a time and so left out of the features, which and
	// why (a type given for the column reads it instead).
	LeftOut []string
	// Stray says what a typed reading doubted but did anyway: the few
	// texts in a column of numbers read as missing cells, a column named
	// in the column list that looks like an identifier or a time read as
	// asked.
	Stray []string

	// stats are each column's range, gathered while a typed reading
	// parsed the numbers (nil otherwise)
	stats *columnStats
	// fit, when set, fits scalers instead of the rows (a Stream's
	// Bounds: its statistics of every training row)
	fit func(ScaleKind) (*Scaler, error)
}

// New wraps x (rows x cols, row-major) in a Dataset, checking the length and
// that every value is finite. x is used, not copied.
func New(x []float32, rows, cols int) (*Dataset, error) {
	if rows < 0 || cols <= 0 || len(x) != rows*cols {
		return nil, fmt.Errorf("data: %d values do not make %d rows of %d", len(x), rows, cols)
	}
	for i, v := range x {
		if v-v != 0 {
			return nil, fmt.Errorf("data: row %d column %d is %v", i/cols, i%cols, v)
		}
	}
	return &Dataset{Rows: rows, Cols: cols, X: x}, nil
}

// Row returns row i, aliasing the dataset's storage.
func (d *Dataset) Row(i int) []float32 { return d.X[i*d.Cols : (i+1)*d.Cols] }

// Label returns row i's label, or Unlabelled.
func (d *Dataset) Label(i int) int {
	if d.Labels == nil {
		return Unlabelled
	}
	return d.Labels[i]
}

// Classes is one more than the largest label (0 when there are none).
func (d *Dataset) Classes() int {
	n := 0
	for _, l := range d.Labels {
		if l+1 > n {
			n = l + 1
		}
	}
	return n
}

// Subset copies the rows at idx, in that order, into a new Dataset.
func (d *Dataset) Subset(idx []int) *Dataset {
	s := &Dataset{Rows: len(idx), Cols: d.Cols, X: make([]float32, len(idx)*d.Cols), Columns: d.Columns, Image: d.Image, Encoding: d.Encoding}
	if d.Labels != nil {
		s.Labels = make([]int, len(idx))
	}
	for k, i := range idx {
		copy(s.X[k*d.Cols:], d.Row(i))
		if d.Labels != nil {
			s.Labels[k] = d.Labels[i]
		}
	}
	return s
}

// Split shuffles row indices with rng and returns a training part and a
// validation part holding round(valFrac*Rows) rows (at least one of each
// when 0 < valFrac < 1 and Rows >= 2). valFrac 0 returns the whole set as
// training and a nil validation set.
func (d *Dataset) Split(valFrac float64, rng *rand.Rand) (train, val *Dataset, err error) {
	perm, nv, err := d.splitPerm(valFrac, rng)
	if err != nil {
		return nil, nil, err
	}
	if perm == nil {
		return d, nil, nil
	}
	return d.Subset(perm[nv:]), d.Subset(perm[:nv]), nil
}

// splitPerm checks a validation fraction and draws Split's permutation:
// the first nv rows of perm are the validation part. A nil perm with no
// error means no split (valFrac 0).
func (d *Dataset) splitPerm(valFrac float64, rng *rand.Rand) (perm []int, nv int, err error) {
	if !(valFrac >= 0 && valFrac < 1) {
		return nil, 0, fmt.Errorf("%w: validation fraction %v outside [0, 1)", ErrConfig, valFrac)
	}
	if valFrac == 0 {
		return nil, 0, nil
	}
	if d.Rows < 2 {
		return nil, 0, fmt.Errorf("data: cannot split %d rows", d.Rows)
	}
	nv = int(math.Round(valFrac * float64(d.Rows)))
	nv = min(max(nv, 1), d.Rows-1)
	return rng.Perm(d.Rows), nv, nil
}

// SplitInPlace is Split without the copies: it reorders d's rows (and
// labels) so that the training part comes first and the validation part
// last, each in the order Split gives them, and returns two views of d's
// memory. The parts equal Split's for the same rng, row for row; d itself
// is left shuffled. It needs one row of extra memory and, per row, an int
// of the permutation and a bool (17 bytes a row on 64-bit machines).
func (d *Dataset) SplitInPlace(valFrac float64, rng *rand.Rand) (train, val *Dataset, err error) {
	perm, nv, err := d.splitPerm(valFrac, rng)
	if err != nil {
		return nil, nil, err
	}
	if perm == nil {
		return d, nil, nil
	}
	// position i takes old row order[i]: Split's training rows, then its
	// validation rows
	order := append(perm[nv:len(perm):len(perm)], perm[:nv]...)
	d.gather(order)
	nt := d.Rows - nv
	view := func(lo, hi int) *Dataset {
		v := &Dataset{Rows: hi - lo, Cols: d.Cols, X: d.X[lo*d.Cols : hi*d.Cols : hi*d.Cols], Columns: d.Columns, Image: d.Image, Encoding: d.Encoding}
		if d.Labels != nil {
			v.Labels = d.Labels[lo:hi:hi]
		}
		return v
	}
	return view(0, nt), view(nt, d.Rows), nil
}

// gather reorders rows in place so that row i becomes old row order[i]
// (order a permutation), following each cycle once with one row held
// aside.
func (d *Dataset) gather(order []int) {
	done := make([]bool, len(order))
	tmp := make([]float32, d.Cols)
	for start := range order {
		if done[start] || order[start] == start {
			done[start] = true
			continue
		}
		copy(tmp, d.Row(start))
		var lab int
		if d.Labels != nil {
			lab = d.Labels[start]
		}
		j := start
		for {
			done[j] = true
			k := order[j]
			if k == start {
				copy(d.X[j*d.Cols:(j+1)*d.Cols], tmp)
				if d.Labels != nil {
					d.Labels[j] = lab
				}
				break
			}
			copy(d.X[j*d.Cols:(j+1)*d.Cols], d.Row(k))
			if d.Labels != nil {
				d.Labels[j] = d.Labels[k]
			}
			j = k
		}
	}
}

// Fingerprint is a SHA-256 over the shape, values and labels, in hex: the
// same data always gives the same fingerprint.
func (d *Dataset) Fingerprint() string {
	h := sha256.New()
	var b [8]byte
	binary.LittleEndian.PutUint64(b[:], uint64(d.Rows))
	h.Write(b[:])
	binary.LittleEndian.PutUint64(b[:], uint64(d.Cols))
	h.Write(b[:])
	buf := make([]byte, 0, 4096)
	for _, v := range d.X {
		buf = binary.LittleEndian.AppendUint32(buf, math.Float32bits(v))
		if len(buf) == cap(buf) {
			h.Write(buf)
			buf = buf[:0]
		}
	}
	h.Write(buf)
	for _, l := range d.Labels {
		binary.LittleEndian.PutUint64(b[:], uint64(int64(l)))
		h.Write(b[:])
	}
	return hex.EncodeToString(h.Sum(nil))
}

// Batches walks a dataset in mini-batches, reshuffled each epoch from its
// own generator. It never allocates after construction.
type Batches struct {
	d       *Dataset
	size    int
	perm    []int
	rng     *rand.Rand
	shuffle bool
	drop    bool
}

// BatchConfig configures Batches. Zero fields mean: batch size 64,
// shuffled, final partial batch kept.
type BatchConfig struct {
	Size int
	// InOrder keeps the dataset's row order (no shuffling).
	InOrder bool
	// DropPartial skips a final batch smaller than Size.
	DropPartial bool
}

// NewBatches validates cfg and returns a batch walker over d; rng is
// required unless InOrder.
func NewBatches(d *Dataset, cfg BatchConfig, rng *rand.Rand) (*Batches, error) {
	if cfg.Size == 0 {
		cfg.Size = 64
	}
	if cfg.Size < 0 {
		return nil, fmt.Errorf("%w: batch size %d", ErrConfig, cfg.Size)
	}
	if !cfg.InOrder && rng == nil {
		return nil, fmt.Errorf("%w: shuffled batches need a random generator", ErrConfig)
	}
	if d.Rows == 0 {
		return nil, fmt.Errorf("data: no rows to batch")
	}
	b := &Batches{d: d, size: cfg.Size, perm: make([]int, d.Rows), rng: rng, shuffle: !cfg.InOrder, drop: cfg.DropPartial}
	for i := range b.perm {
		b.perm[i] = i
	}
	return b, nil
}

// Shuffle draws a new row order for the next epoch (a Fisher-Yates shuffle
// from the walker's generator; no-op for in-order batches).
func (b *Batches) Shuffle() {
	if !b.shuffle {
		return
	}
	for i := range b.perm {
		b.perm[i] = i
	}
	b.rng.Shuffle(len(b.perm), func(i, j int) { b.perm[i], b.perm[j] = b.perm[j], b.perm[i] })
}

// Len is the number of batches per epoch.
func (b *Batches) Len() int {
	if b.drop {
		return b.d.Rows / b.size
	}
	return (b.d.Rows + b.size - 1) / b.size
}

// Rows is the number of rows in batch i.
func (b *Batches) Rows(i int) int { return min(b.size, b.d.Rows-i*b.size) }

// Indices returns the dataset rows of batch i (aliasing internal state).
func (b *Batches) Indices(i int) []int { return b.perm[i*b.size : i*b.size+b.Rows(i)] }

// Gather copies batch i's rows into x (Rows(i)*Cols values) and, when labels
// is not nil, their labels.
func (b *Batches) Gather(i int, x []float32, labels []int) {
	c := b.d.Cols
	for k, r := range b.Indices(i) {
		copy(x[k*c:(k+1)*c], b.d.X[r*c:(r+1)*c])
		if labels != nil {
			labels[k] = b.d.Label(r)
		}
	}
}

// CheckRows reports whether x holds rows rows of cols finite values, the
// check every graph-free pass makes of its input; what names the input in
// the message ("input", "latent").
func CheckRows(x []float32, rows, cols int, what string) error {
	if rows < 0 || len(x) != rows*cols {
		return fmt.Errorf("%s has %d values, want %d rows x %d columns", what, len(x), rows, cols)
	}
	for i, v := range x {
		if v-v != 0 {
			return fmt.Errorf("%s row %d column %d is %v", what, i/cols+1, i%cols+1, v)
		}
	}
	return nil
}

// Schema describes the rows a model reads and writes: the names of the
// columns and, for image rows, their height, width and channels.
type Schema struct {
	Columns []string
	Image   []int
	// Encoding, for a model of a table read by type, says how the
	// table's columns become Columns.
	Encoding *Encoding
}
