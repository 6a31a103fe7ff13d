package data

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"github.com/klauspost/compress/gzip"
	"io"
	"math"
	"os"
)

// The idx format: two zero bytes, a type byte, a dimension count, then one
// big-endian uint32 per dimension, then the values big-endian, row-major.
var idxSizes = map[byte]int{0x08: 1, 0x09: 1, 0x0B: 2, 0x0C: 4, 0x0D: 4, 0x0E: 8}

// IDX is a decoded idx array.
type IDX struct {
	Dims   []int
	Type   byte
	Values []float32
}

// ReadIDX decodes an idx stream, plain or gzip-compressed (told apart by
// content). size is the stream's byte length when known (a plain file), or
// -1. The declared shape is checked against lim (zero fields: the
// defaults; the first dimension counts rows, the others make a row's
// columns) and, for a plain file, against its size before anything is
// allocated; for compressed input, memory grows only with data actually
// read.
func ReadIDX(r io.Reader, name string, size int64, lim Limits) (*IDX, error) {
	lim, err := lim.resolve()
	if err != nil {
		return nil, err
	}
	br := bufio.NewReader(r)
	packed := int64(-1) // the compressed size, for a gzip stream of known size
	head, _ := br.Peek(2)
	var src io.Reader = br
	if len(head) == 2 && head[0] == 0x1f && head[1] == 0x8b {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return nil, &ParseError{File: name, Msg: "bad gzip stream: " + err.Error()}
		}
		defer zr.Close()
		packed = size
		src, size = zr, -1
	}
	var magic [4]byte
	if _, err := io.ReadFull(src, magic[:]); err != nil {
		return nil, &ParseError{File: name, Msg: "too short for an idx header"}
	}
	if magic[0] != 0 || magic[1] != 0 {
		return nil, &ParseError{File: name, Msg: fmt.Sprintf("not an idx file (magic % x)", magic)}
	}
	es, ok := idxSizes[magic[2]]
	if !ok {
		return nil, &ParseError{File: name, Msg: fmt.Sprintf("unknown idx value type 0x%02x", magic[2])}
	}
	nd := int(magic[3])
	if nd < 1 || nd > 4 {
		return nil, &ParseError{File: name, Msg: fmt.Sprintf("idx declares %d dimensions, want 1 to 4", nd)}
	}
	dimb := make([]byte, 4*nd)
	if _, err := io.ReadFull(src, dimb); err != nil {
		return nil, &ParseError{File: name, Msg: "idx header truncated"}
	}
	dims := make([]int, nd)
	total, cols := int64(1), int64(1)
	for i := range dims {
		dims[i] = int(binary.BigEndian.Uint32(dimb[4*i:]))
		if dims[i] == 0 {
			return nil, &ParseError{File: name, Msg: fmt.Sprintf("idx dimension %d is 0", i)}
		}
		if i > 0 {
			// compared by division, so that no product overflows
			// whatever the limits
			if int64(dims[i]) > int64(lim.Columns)/cols {
				return nil, &LimitError{File: name, Key: "columns", Limit: int64(lim.Columns), What: fmt.Sprintf("idx shape %v makes rows of more than %d values", dims[:i+1], lim.Columns)}
			}
			cols *= int64(dims[i])
		}
	}
	if dims[0] > lim.Rows {
		return nil, &LimitError{File: name, Key: "rows", Limit: int64(lim.Rows), What: fmt.Sprintf("idx shape %v declares %d rows", dims, dims[0])}
	}
	if int64(dims[0]) > lim.Values/cols {
		return nil, &LimitError{File: name, Key: "values", Limit: lim.Values, What: fmt.Sprintf("idx shape %v declares more than %d values", dims, lim.Values)}
	}
	total = int64(dims[0]) * cols
	if total > (lim.Bytes-4-4*int64(nd))/int64(es) {
		return nil, &LimitError{File: name, Key: "bytes", Limit: lim.Bytes, What: fmt.Sprintf("idx shape %v declares more than %d bytes", dims, lim.Bytes)}
	}
	want := total * int64(es)
	if size >= 0 {
		if got := size - 4 - 4*int64(nd); got != want {
			return nil, &ParseError{File: name, Msg: fmt.Sprintf("idx header %v declares %d bytes of values, file holds %d", dims, want, got)}
		}
	}
	// values are converted as they are read, a block at a time, straight
	// into the float32 slice: for a plain file the size was checked above,
	// so the slice is made at once; for a compressed stream it grows with
	// the data that actually arrive (doubling, capped at the declared
	// count), so a small file that declares a large shape costs little
	out := &IDX{Dims: dims, Type: magic[2]}
	if size >= 0 {
		out.Values = make([]float32, 0, total)
	} else {
		// deflate expands at most 1032 to 1 (a 258-byte match per 2-bit
		// code; zlib's technical notes, from memory), so a stream of
		// known compressed size can justify at most that much: set it
		// aside at once, and a small file that declares a large shape
		// still costs little
		guess := int64(1 << 20)
		if packed > 0 {
			guess = max(guess, packed*maxInflate/int64(es))
		}
		out.Values = make([]float32, 0, min(total, guess))
	}
	block := make([]byte, (64<<10)/es*es)
	for int64(len(out.Values)) < total {
		n := min(int64(len(block)/es), total-int64(len(out.Values)))
		got, err := io.ReadFull(src, block[:n*int64(es)])
		if err != nil {
			held := int64(len(out.Values))*int64(es) + int64(got)
			if size >= 0 {
				return nil, &ParseError{File: name, Msg: "idx values truncated: " + err.Error()}
			}
			if err != io.EOF && err != io.ErrUnexpectedEOF {
				return nil, &ParseError{File: name, Msg: "reading idx values: " + err.Error()}
			}
			return nil, &ParseError{File: name, Msg: fmt.Sprintf("idx header %v declares %d bytes of values, stream holds %d", dims, want, held)}
		}
		if len(out.Values)+int(n) > cap(out.Values) {
			grown := make([]float32, len(out.Values), min(total, max(2*int64(cap(out.Values)), int64(len(out.Values))+n)))
			copy(grown, out.Values)
			out.Values = grown
		}
		base := len(out.Values)
		out.Values = out.Values[:base+int(n)]
		if err := convertIDX(out.Values[base:], block[:n*int64(es)], magic[2], name, base); err != nil {
			return nil, err
		}
	}
	if size < 0 {
		// the end of the stream: no more values, and for gzip its
		// checksum and length verified (an error that may come only
		// now, with the last values already read)
		var one [1]byte
		k, err := io.ReadFull(src, one[:])
		if k > 0 {
			return nil, &ParseError{File: name, Msg: fmt.Sprintf("idx header %v declares %d bytes of values, the stream holds more", dims, want)}
		}
		if err != io.EOF {
			return nil, &ParseError{File: name, Msg: "reading idx values: " + err.Error()}
		}
	}
	return out, nil
}

// convertIDX converts the big-endian values of one block (of value type
// typ) into dst; first is the index of dst's first value in the file,
// for errors.
func convertIDX(dst []float32, raw []byte, typ byte, name string, first int) error {
	if typ == 0x08 {
		for i, b := range raw {
			dst[i] = float32(b)
		}
		return nil
	}
	es := idxSizes[typ]
	for i := range dst {
		b := raw[i*es:]
		var v float64
		switch typ {
		case 0x08:
			v = float64(b[0])
		case 0x09:
			v = float64(int8(b[0]))
		case 0x0B:
			v = float64(int16(binary.BigEndian.Uint16(b)))
		case 0x0C:
			v = float64(int32(binary.BigEndian.Uint32(b)))
		case 0x0D:
			v = float64(math.Float32frombits(binary.BigEndian.Uint32(b)))
		case 0x0E:
			v = math.Float64frombits(binary.BigEndian.Uint64(b))
		}
		if math.IsNaN(v) || math.IsInf(v, 0) || math.Abs(v) > math.MaxFloat32 {
			return &ParseError{File: name, Msg: fmt.Sprintf("idx value %d is %v", first+i, v)}
		}
		dst[i] = float32(v)
	}
	return nil
}

// maxInflate is deflate's largest expansion of compressed bytes (from
// memory: zlib's technical notes give 1032:1).
const maxInflate = 1032

// LoadIDXFile reads one idx file (plain or gzip-compressed) within lim.
func LoadIDXFile(path string, lim Limits) (*IDX, error) {
	return loadIDXFile(path, lim, nil)
}

func loadIDXFile(path string, lim Limits, report Progress) (*IDX, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("data: %w", err)
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("data: %w", err)
	}
	return ReadIDX(withProgress(f, report), path, st.Size(), lim)
}

// IDXConfig configures LoadIDX. Zero fields mean: no labels; unsigned-byte
// values are divided by 255 into [0, 1].
type IDXConfig struct {
	// Labels is an idx file of one label per row (optional).
	Labels string
	// Raw keeps unsigned-byte values in 0..255.
	Raw bool
	// Limits caps the files' size, rows and columns.
	Limits Limits
	// Progress, when not nil, is told how much of the data file (not
	// the label file) has been read.
	Progress Progress
}

// LoadIDX reads an idx file of rows (the first dimension) into a Dataset;
// the other dimensions are flattened. A three-dimensional file is taken as
// grey images (rows x height x width).
func LoadIDX(path string, cfg IDXConfig) (*Dataset, error) {
	a, err := loadIDXFile(path, cfg.Limits, cfg.Progress)
	if err != nil {
		return nil, err
	}
	rows := a.Dims[0]
	cols := len(a.Values) / rows
	if a.Type == 0x08 && !cfg.Raw {
		for i := range a.Values {
			a.Values[i] /= 255
		}
	}
	d := &Dataset{Rows: rows, Cols: cols, X: a.Values}
	switch len(a.Dims) {
	case 3:
		d.Image = []int{a.Dims[1], a.Dims[2], 1}
	case 4:
		d.Image = []int{a.Dims[1], a.Dims[2], a.Dims[3]}
	}
	if cfg.Labels != "" {
		l, err := LoadIDXFile(cfg.Labels, cfg.Limits)
		if err != nil {
			return nil, err
		}
		if len(l.Dims) != 1 || l.Dims[0] != rows {
			return nil, &ParseError{File: cfg.Labels, Msg: fmt.Sprintf("labels have shape %v, want %d", l.Dims, rows)}
		}
		d.Labels = make([]int, rows)
		for i, v := range l.Values {
			if v < 0 || v != float32(math.Trunc(float64(v))) {
				return nil, &ParseError{File: cfg.Labels, Msg: fmt.Sprintf("label %d is %v, want a class index >= 0", i, v)}
			}
			d.Labels[i] = int(v)
		}
	}
	return d, nil
}
