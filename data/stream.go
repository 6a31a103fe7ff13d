package data

import (
	"bufio"
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"time"

	"github.com/quernlab/quern/internal/stream"
)

// A Stream is a CSV table of numbers (plain or gzip) too large to hold:
// OpenStream reads it once to check every cell and to learn what training
// needs (the rows, the split into training and validation rows, each
// column's range, mean and spread, a seeded sample of the training rows),
// and Each reads it again, in file order, a few mebibytes of text at a
// time, as often as asked. Memory stays a few batches of text and their
// rows whatever the file's size.
//
// Rows go to validation one by one, each with probability Validation,
// by a seeded hash of its place in the file: every pass splits the file
// the same way, in any order, and the validation rows are about (not
// exactly) that share of them. EachShuffled reads a plain file's rows in
// runs of blockRows in a random order, for training.
type Stream struct {
	// Path is the file.
	Path string
	// Cols is the number of feature columns, Columns their names.
	Cols    int
	Columns []string
	// Rows counts the file's rows; TrainRows and ValRows the two parts.
	Rows, TrainRows, ValRows int
	// Sample is a seeded uniform sample of the training rows (at most
	// StreamConfig.Sample of them), in file order: for choosing defaults,
	// fitting what needs rows but not all of them, and figures.
	Sample *Dataset
	// Fingerprint is the SHA-256 of the rows' count, width and values in
	// file order (Dataset.Fingerprint's content, hashed in a stream's
	// order: a stream and a Dataset of the same rows differ in it).
	Fingerprint string

	cfg       CSVConfig
	valFrac   float64
	splitSeed uint64
	// blocks are runs of blockRows rows (a plain file's: a gzip file's
	// bytes cannot be read out of order), where each begins in the file
	// and which row it begins with; prefix is the bytes before the first
	// row (skipped lines, the header); size and mod are the file's, to
	// notice it change
	blocks   []block
	prefix   int64
	size     int64
	modified time.Time
	gzip     bool
	// parquet: the file is a Parquet table of groups row groups, which
	// a shuffled pass reads in a random order
	parquet bool
	groups  int
	// cache is the binary copy of the rows (nil: none), cacheName its
	// name while it has one
	cache      *os.File
	cacheName  string
	lo, hi     []float64 // the training rows' range per column
	mean, m2   []float64 // their mean and sum of squared deviations
	valLo, vHi []float64 // the validation rows' range
}

// StreamConfig says how to read a Stream. Zero fields mean: no
// validation rows, split seed 0, a sample of DefaultSampleRows rows.
type StreamConfig struct {
	// CSV is how the file is read (Typed, Label, Keep and Encoding are
	// not for streams: a stream reads numbers). Of its Limits, rows and
	// values do not apply (nothing is held) and bytes defaults to none.
	CSV CSVConfig
	// Validation is the share of rows held out, in [0, 1).
	Validation float64
	// SplitSeed seeds the split and the sample.
	SplitSeed uint64
	// Sample is the most training rows kept in Stream.Sample.
	Sample int
	// CacheDir, when set, is a folder for a binary copy of the rows
	// (4 bytes a value) that the first pass writes and every later pass
	// reads instead of parsing the file again; Close removes it. ""
	// means no copy.
	CacheDir string
}

// DefaultSampleRows is the sample a Stream keeps by default: enough for
// the principal components and covariances of tables hundreds of columns
// wide, and a few MiB.
const DefaultSampleRows = 20000

// block is a run of rows of a plain file.
type block struct {
	off int64
	row int
}

// blockRows is the rows of a block: a shuffled pass reads the blocks in
// a random order, so that the rows a shuffle buffer holds come from many
// places in the file, not from one stretch of it.
const blockRows = 1024

// isVal says whether row i (counted from 0 in file order) is held out:
// a draw of SplitMix64 (Steele, Lea and Flood, "Fast splittable
// pseudorandom number generators", OOPSLA 2014) seeded with the split
// seed, the stream's name and i, so that a row's part does not depend on
// the order it is read in.
func (s *Stream) isVal(i int) bool {
	if s.valFrac == 0 {
		return false
	}
	const golden = 0x9e3779b97f4a7c15
	z := (s.splitSeed ^ stream.Split<<32) + uint64(i+1)*golden
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	z ^= z >> 31
	return float64(z>>11)/(1<<53) < s.valFrac
}

// Part names the rows a pass over a Stream gives.
type Part int

const (
	// AllRows are every row of the file.
	AllRows Part = iota
	// TrainRows are the rows not held out.
	TrainRows
	// ValRows are the held-out rows.
	ValRows
)

// ErrStream is wrapped by the errors of a table a stream cannot read:
// a text cell, a label column.
var ErrStream = errors.New("data: cannot stream")

// OpenStream makes a Stream's first pass over the CSV file at path.
func OpenStream(path string, cfg StreamConfig) (*Stream, error) {
	c := cfg.CSV
	switch {
	case c.Label != "" || c.Keep != nil || c.Encoding != nil:
		return nil, fmt.Errorf("%w: %s: a streamed table is read for its numbers only (no labels, kept columns or a model's encoding)", ErrStream, path)
	case !(cfg.Validation >= 0 && cfg.Validation < 1):
		return nil, fmt.Errorf("%w: validation share %v, want [0, 1)", ErrConfig, cfg.Validation)
	case cfg.Sample < 0:
		return nil, fmt.Errorf("%w: sample of %d rows", ErrConfig, cfg.Sample)
	}
	c.Typed, c.Types, c.Missing = false, nil, nil
	if c.Limits.Bytes == 0 {
		// the file's size costs no memory here: only what is asked for
		c.Limits.Bytes = math.MaxInt64
	}
	s := &Stream{Path: path, cfg: c, valFrac: cfg.Validation, splitSeed: cfg.SplitSeed, parquet: isParquet(path)}
	sample := cfg.Sample
	if sample == 0 {
		sample = DefaultSampleRows
	}
	// the sample: reservoir sampling (Vitter's algorithm R) over the
	// training rows, with its own generator
	pick := rand.New(rand.NewPCG(cfg.SplitSeed, stream.Sample))
	var res []float32
	var resLine []int
	seen := 0
	h := sha256.New()
	var buf []byte
	first := true
	var cw *bufio.Writer
	if cfg.CacheDir != "" {
		if err := s.makeCache(cfg.CacheDir); err != nil {
			return nil, err
		}
		cw = bufio.NewWriterSize(s.cache, 1<<20)
	}
	err := s.pass(nil, func(x []float32, val []bool, lines []int, offs []int64, rows int) error {
		if first {
			first = false
			s.lo, s.hi = filled(s.Cols, math.Inf(1)), filled(s.Cols, math.Inf(-1))
			s.valLo, s.vHi = filled(s.Cols, math.Inf(1)), filled(s.Cols, math.Inf(-1))
			s.mean, s.m2 = make([]float64, s.Cols), make([]float64, s.Cols)
			res = make([]float32, 0, min(sample, 1<<16)*s.Cols)
		}
		buf = buf[:0]
		for _, v := range x {
			buf = binary.LittleEndian.AppendUint32(buf, math.Float32bits(v))
		}
		h.Write(buf)
		if cw != nil {
			if _, err := cw.Write(buf); err != nil {
				return s.cacheErr(err)
			}
		}
		for r := range rows {
			row := x[r*s.Cols : (r+1)*s.Cols]
			if s.Rows%blockRows == 0 && offs != nil {
				s.blocks = append(s.blocks, block{offs[r], s.Rows})
			}
			s.Rows++
			if val[r] {
				s.ValRows++
				for j, v := range row {
					s.valLo[j], s.vHi[j] = math.Min(s.valLo[j], float64(v)), math.Max(s.vHi[j], float64(v))
				}
				continue
			}
			s.TrainRows++
			n := float64(s.TrainRows)
			for j, v := range row {
				f := float64(v)
				s.lo[j], s.hi[j] = math.Min(s.lo[j], f), math.Max(s.hi[j], f)
				// Welford's running mean and squared deviations
				d := f - s.mean[j]
				s.mean[j] += d / n
				s.m2[j] += d * (f - s.mean[j])
			}
			seen++
			switch {
			case seen <= sample:
				res = append(res, row...)
				resLine = append(resLine, lines[r])
			default:
				if k := pick.IntN(seen); k < sample {
					copy(res[k*s.Cols:(k+1)*s.Cols], row)
					resLine[k] = lines[r]
				}
			}
		}
		return nil
	})
	if err == nil && cw != nil {
		if err = cw.Flush(); err != nil {
			err = s.cacheErr(err)
		}
	}
	if err != nil {
		s.Close()
		return nil, err
	}
	if s.TrainRows == 0 {
		s.Close()
		return nil, &ParseError{File: path, Msg: fmt.Sprintf("no training rows among the %d (validation share %v)", s.Rows, cfg.Validation)}
	}
	if s.gzip {
		s.blocks = nil
	} else if len(s.blocks) > 0 {
		s.prefix = s.blocks[0].off
	}
	var b [8]byte
	binary.LittleEndian.PutUint64(b[:], uint64(s.Rows))
	h.Write(b[:])
	binary.LittleEndian.PutUint64(b[:], uint64(s.Cols))
	h.Write(b[:])
	s.Fingerprint = hex.EncodeToString(h.Sum(nil))
	// the sample in file order, so that it does not depend on how the
	// reservoir met the rows
	order := make([]int, len(resLine))
	for i := range order {
		order[i] = i
	}
	slices.SortFunc(order, func(a, b int) int { return resLine[a] - resLine[b] })
	sd := &Dataset{Rows: len(order), Cols: s.Cols, X: make([]float32, len(order)*s.Cols), Columns: s.Columns}
	for k, i := range order {
		copy(sd.X[k*s.Cols:], res[i*s.Cols:(i+1)*s.Cols])
	}
	s.Sample = sd
	return s, nil
}

func filled(n int, v float64) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = v
	}
	return out
}

// pass reads the file once, handing f each batch's rows with, for each,
// whether it is a validation row, its line and its first byte: in file
// order when order is nil, else the plain file's blocks in that order
// (a permutation of their indices).
func (s *Stream) pass(order []int, f func(x []float32, val []bool, lines []int, offs []int64, rows int) error) error {
	if s.cache != nil && s.Cols > 0 {
		// the binary copy: the file is not read again
		return s.cachePass(order, f)
	}
	var val []bool
	fh, err := os.Open(s.Path)
	if err != nil {
		return fmt.Errorf("data: %w", err)
	}
	defer fh.Close()
	st, err := fh.Stat()
	if err != nil {
		return fmt.Errorf("data: %w", err)
	}
	if s.Cols == 0 {
		s.size, s.modified = st.Size(), st.ModTime()
	} else if st.Size() != s.size || !st.ModTime().Equal(s.modified) {
		return &ParseError{File: s.Path, Msg: "the file changed since it was first read (its size or time differs)"}
	}
	if s.parquet {
		return s.parquetPass(order, f)
	}
	var in io.Reader = fh
	// index maps the k-th row read to its place in the file
	index := func(k int) int { return k }
	if order != nil && s.blocks != nil {
		parts := []io.Reader{io.NewSectionReader(fh, 0, s.prefix)}
		starts := make([]int, len(order)+1) // rows read before each block
		for k, bi := range order {
			end, rows := s.size, s.Rows-s.blocks[bi].row
			if bi+1 < len(s.blocks) {
				end, rows = s.blocks[bi+1].off, s.blocks[bi+1].row-s.blocks[bi].row
			}
			// a newline after each block: the file's last row may lack one
			parts = append(parts, io.NewSectionReader(fh, s.blocks[bi].off, end-s.blocks[bi].off), bytes.NewReader([]byte{'\n'}))
			starts[k+1] = starts[k] + rows
		}
		in = io.MultiReader(parts...)
		k := 0
		index = func(t int) int {
			for k+1 < len(starts) && t >= starts[k+1] {
				k++
			}
			if k+1 == len(starts) {
				return -1 // more rows than the blocks held: the file changed
			}
			return s.blocks[order[k]].row + t - starts[k]
		}
	}
	r, gz, err := maybeGzip(in)
	if err != nil {
		return &ParseError{File: s.Path, Msg: err.Error()}
	}
	if s.Cols == 0 {
		s.gzip = gz
	}
	read := 0
	c := s.cfg
	c.emit = func(b *csvBatch, d *Dataset) error {
		if s.Cols == 0 {
			s.Cols, s.Columns = d.Cols, d.Columns
		} else if d.Cols != s.Cols || !slices.Equal(d.Columns, s.Columns) {
			return &ParseError{File: s.Path, Msg: "the file changed since it was first read (its columns differ)"}
		}
		n := len(b.rowLines)
		val = val[:0]
		for range n {
			i := index(read)
			if i < 0 {
				return &ParseError{File: s.Path, Msg: "the file changed since it was first read (it holds more rows)"}
			}
			val = append(val, s.isVal(i))
			read++
		}
		return f(b.x, val, b.rowLines, b.rowOffs, n)
	}
	_, err = readCSV(r, s.Path, c, -1)
	var pe *ParseError
	if errors.As(err, &pe) && pe.text {
		return fmt.Errorf("%w: %s (a streamed table holds numbers only: -columns picks the numeric ones; categories and missing cells need the table in memory)", ErrStream, strings.TrimPrefix(err.Error(), "data: "))
	}
	return err
}

// Each reads the file again and hands f the part's rows in file order, a
// run at a time (x holds rows*Cols values; f must not keep it). A file
// that no longer holds the rows the first pass counted is an error.
func (s *Stream) Each(part Part, f func(x []float32, rows int) error) error {
	return s.each(nil, part, f)
}

// EachShuffled is Each with the rows read in runs of 1024 in an order
// drawn from rng, so that what a shuffle buffer then mixes comes from all
// over the file: from the binary copy (StreamConfig.CacheDir) whatever the
// format; without one, a plain CSV file's runs in the same order (the
// same rows in the same order as with the copy), a Parquet file's row
// groups in an order drawn from rng, a gzip file's rows in file order (a
// stream read without a copy then trains another model than with one).
func (s *Stream) EachShuffled(part Part, rng *rand.Rand, f func(x []float32, rows int) error) error {
	var order []int
	switch {
	case s.cache != nil:
		order = rng.Perm((s.Rows + blockRows - 1) / blockRows)
	case s.parquet:
		order = rng.Perm(s.groups)
	case s.blocks != nil:
		order = rng.Perm(len(s.blocks))
	}
	return s.each(order, part, f)
}

func (s *Stream) each(order []int, part Part, f func(x []float32, rows int) error) error {
	var out []float32
	total := 0
	err := s.pass(order, func(x []float32, val []bool, _ []int, _ []int64, rows int) error {
		total += rows
		if part == AllRows {
			return f(x, rows)
		}
		out = out[:0]
		n := 0
		for r := range rows {
			if val[r] == (part == ValRows) {
				out = append(out, x[r*s.Cols:(r+1)*s.Cols]...)
				n++
			}
		}
		if n == 0 {
			return nil
		}
		return f(out, n)
	})
	if err == nil && total != s.Rows {
		err = &ParseError{File: s.Path, Msg: fmt.Sprintf("the file changed since it was first read: %d rows, then %d", s.Rows, total)}
	}
	return err
}

// Bounds is a two-row stand-in for the part's rows (TrainRows or
// ValRows): each column's least value, then its greatest, with the
// stream's columns. Whatever depends on the rows only through their
// ranges (a min-max scaler, a check that values lie in [0, 1], the
// scaled columns' ranges) gets from it what it would from all of them;
// Fit on the training part's bounds fits on the stream's statistics of
// every training row. Nil for an empty part.
func (s *Stream) Bounds(part Part) *Dataset {
	lo, hi, rows := s.lo, s.hi, s.TrainRows
	if part == ValRows {
		lo, hi, rows = s.valLo, s.vHi, s.ValRows
	}
	if rows == 0 {
		return nil
	}
	d := &Dataset{Rows: 2, Cols: s.Cols, X: make([]float32, 2*s.Cols), Columns: s.Columns}
	for j := range s.Cols {
		d.X[j], d.X[s.Cols+j] = float32(lo[j]), float32(hi[j])
	}
	if part == TrainRows {
		d.fit = s.fit
	}
	return d
}

// fit is Fit on every training row, from the first pass's statistics
// (the population standard deviation, as Fit's).
func (s *Stream) fit(kind ScaleKind) (*Scaler, error) {
	return scalerOf(kind, s.Cols, func() (mean, sd []float64) {
		sd = make([]float64, s.Cols)
		for j := range sd {
			sd[j] = math.Sqrt(s.m2[j] / float64(s.TrainRows))
		}
		return s.mean, sd
	}, func() (lo, hi []float64) { return s.lo, s.hi })
}

// Constant names the columns whose training rows all hold one value.
func (s *Stream) Constant() []string {
	var out []string
	for j := range s.Cols {
		if s.lo[j] == s.hi[j] {
			out = append(out, s.Columns[j])
		}
	}
	return out
}

// EachRows is EachCSV for a CSV file, and for a Parquet file its rows
// read likewise (no kept columns: kept texts are CSV's).
func EachRows(path string, cfg CSVConfig, f func(columns []string, x []float32, kept []string, rows int) error) error {
	if !isParquet(path) {
		return EachCSV(path, cfg, f)
	}
	t, err := openParquet(path, cfg)
	if err != nil {
		return err
	}
	defer t.close()
	err = t.each(nil, func(x []float32, rows, _ int) error { return f(t.columns, x, nil, rows) })
	var pe *ParseError
	if errors.As(err, &pe) && pe.text {
		return fmt.Errorf("%w: %s", ErrStream, strings.TrimPrefix(err.Error(), "data: "))
	}
	return err
}

// EachCSV reads a CSV table of numbers (plain or gzip) once, in file
// order, handing f a run of rows at a time, never the whole table: x
// holds rows*len(columns) values and kept the cfg.Keep columns' texts
// (rows*len(cfg.Keep)); f must keep neither. columns are the feature
// columns' names, known before the first call (f may be called for none
// when the file has no rows: then the error says so). A text cell is an
// error wrapping ErrStream.
func EachCSV(path string, cfg CSVConfig, f func(columns []string, x []float32, kept []string, rows int) error) error {
	if cfg.Label != "" || cfg.Encoding != nil {
		return fmt.Errorf("%w: %s: a streamed table is read for its numbers only (no labels or a model's encoding)", ErrStream, path)
	}
	cfg.Typed, cfg.Types, cfg.Missing = false, nil, nil
	if cfg.Limits.Bytes == 0 {
		cfg.Limits.Bytes = math.MaxInt64 // as a Stream's
	}
	cfg.emit = func(b *csvBatch, d *Dataset) error {
		return f(d.Columns, b.x, b.kept, len(b.rowLines))
	}
	fh, err := os.Open(path)
	if err != nil {
		return fmt.Errorf("data: %w", err)
	}
	defer fh.Close()
	r, _, err := maybeGzip(fh)
	if err != nil {
		return &ParseError{File: path, Msg: err.Error()}
	}
	_, err = readCSV(r, path, cfg, -1)
	var pe *ParseError
	if errors.As(err, &pe) && pe.text {
		return fmt.Errorf("%w: %s (a streamed table holds numbers only: categories and missing cells need the table in memory)", ErrStream, strings.TrimPrefix(err.Error(), "data: "))
	}
	return err
}

// parquetPass is pass over a Parquet file: its row groups in order (nil:
// the file's).
func (s *Stream) parquetPass(order []int, f func(x []float32, val []bool, lines []int, offs []int64, rows int) error) error {
	t, err := openParquet(s.Path, s.cfg)
	if err != nil {
		return err
	}
	defer t.close()
	if s.Cols == 0 {
		s.Cols, s.Columns, s.groups = len(t.columns), t.columns, t.groups()
	} else if len(t.columns) != s.Cols || t.groups() != s.groups {
		return &ParseError{File: s.Path, Msg: "the file changed since it was first read (its columns or row groups differ)"}
	}
	var val []bool
	var lines []int
	err = t.each(order, func(x []float32, rows, first int) error {
		val, lines = val[:0], lines[:0]
		for r := range rows {
			val = append(val, s.isVal(first-1+r))
			lines = append(lines, first+r)
		}
		return f(x, val, lines, nil, rows)
	})
	var pe *ParseError
	if errors.As(err, &pe) && pe.text {
		return fmt.Errorf("%w: %s", ErrStream, strings.TrimPrefix(err.Error(), "data: "))
	}
	return err
}

// makeCache creates the binary copy's file in dir. Where the system
// allows, its name is removed at once: the open file is all there is, and
// nothing is left behind whatever ends the process.
func (s *Stream) makeCache(dir string) error {
	fh, err := os.CreateTemp(dir, "quern-stream-*.rows")
	if err != nil {
		return fmt.Errorf("data: a folder for the rows' binary copy: %w", err)
	}
	s.cache, s.cacheName = fh, fh.Name()
	if runtime.GOOS != "windows" && os.Remove(fh.Name()) == nil {
		s.cacheName = ""
	}
	return nil
}

func (s *Stream) cacheErr(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		err = pe.Err
	}
	return fmt.Errorf("data: writing the rows' binary copy in %s: %w (give another folder, or none)", filepath.Dir(s.cache.Name()), err)
}

// Close removes the binary copy of the rows, if any. A Stream without
// one needs no Close; one with one reads nothing after it.
func (s *Stream) Close() error {
	if s.cache == nil {
		return nil
	}
	err := s.cache.Close()
	if s.cacheName != "" {
		os.Remove(s.cacheName)
	}
	s.cache = nil
	return err
}

// cachePass is pass over the binary copy: runs of rows in file order, or
// blocks of blockRows rows in order (a permutation of their indices).
func (s *Stream) cachePass(order []int, f func(x []float32, val []bool, lines []int, offs []int64, rows int) error) error {
	rowBytes := int64(s.Cols) * 4
	const run = 4096 // rows a read
	raw := make([]byte, run*rowBytes)
	x := make([]float32, run*s.Cols)
	val := make([]bool, run)
	lines := make([]int, run)
	read := func(first, n int) error {
		b := raw[:int64(n)*rowBytes]
		if _, err := s.cache.ReadAt(b, int64(first)*rowBytes); err != nil {
			return fmt.Errorf("data: reading the rows' binary copy: %w", err)
		}
		for i := range x[:n*s.Cols] {
			x[i] = math.Float32frombits(binary.LittleEndian.Uint32(b[4*i:]))
		}
		for r := range n {
			val[r], lines[r] = s.isVal(first+r), first+r+1
		}
		return f(x[:n*s.Cols], val[:n], lines[:n], nil, n)
	}
	if order == nil {
		for first := 0; first < s.Rows; first += run {
			if err := read(first, min(run, s.Rows-first)); err != nil {
				return err
			}
		}
		return nil
	}
	for _, b := range order {
		first := b * blockRows
		if err := read(first, min(blockRows, s.Rows-first)); err != nil {
			return err
		}
	}
	return nil
}
