package data

import (
	"bytes"
	"fmt"
	"io"
)

// Limits caps what one input may hold. Each is checked before memory is
// set aside for what it counts, so that a hostile or mistaken file ends
// in a one-line *LimitError rather than in exhausted memory. Zero fields
// mean the defaults; a negative field is a configuration error.
type Limits struct {
	// Bytes caps the bytes read from one file after decompression (CSV
	// and idx). Default 8 GiB.
	Bytes int64
	// Line caps one line of a CSV file, in bytes. Default 16 MiB.
	Line int
	// Rows caps the rows of one input. Default 100,000,000.
	Rows int
	// Columns caps the values of one row of a CSV or idx file (an image's
	// are capped by Pixels). Default 1,048,576.
	Columns int
	// Values caps the values of one input, rows times columns: the
	// memory the rows take (four bytes each). Default 2^28 (1 GiB).
	Values int64
	// Pixels caps the width times height of one image. Default 2^24.
	Pixels int
	// Images caps the image files of one folder. Default 1,000,000.
	Images int
}

// Default limits; see Limits.
const (
	DefaultBytes   int64 = 8 << 30
	DefaultLine          = 16 << 20
	DefaultRows          = 100_000_000
	DefaultColumns       = 1 << 20
	DefaultValues  int64 = 1 << 28
	DefaultPixels        = 1 << 24
	DefaultImages        = 1_000_000
)

// LimitKeys names the limits in the order Limits declares them, as a
// command line may spell them.
var LimitKeys = []string{"bytes", "line", "rows", "columns", "values", "pixels", "images"}

// resolve fills the defaults and refuses negative limits.
func (l Limits) resolve() (Limits, error) {
	def := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	def(&l.Line, DefaultLine)
	def(&l.Rows, DefaultRows)
	def(&l.Columns, DefaultColumns)
	def(&l.Pixels, DefaultPixels)
	def(&l.Images, DefaultImages)
	if l.Bytes == 0 {
		l.Bytes = DefaultBytes
	}
	if l.Values == 0 {
		l.Values = DefaultValues
	}
	if l.Bytes < 0 || l.Line < 0 || l.Rows < 0 || l.Columns < 0 || l.Values < 0 || l.Pixels < 0 || l.Images < 0 {
		return l, fmt.Errorf("%w: negative limit in %+v", ErrConfig, l)
	}
	return l, nil
}

// Set sets the limit named by key (one of LimitKeys) to v.
func (l *Limits) Set(key string, v int64) error {
	if v <= 0 {
		return fmt.Errorf("%w: limit %s=%d, want at least 1", ErrConfig, key, v)
	}
	small := func(p *int) error {
		if v > int64(^uint(0)>>1) {
			return fmt.Errorf("%w: limit %s=%d is too large", ErrConfig, key, v)
		}
		*p = int(v)
		return nil
	}
	switch key {
	case "bytes":
		l.Bytes = v
	case "line":
		return small(&l.Line)
	case "rows":
		return small(&l.Rows)
	case "columns":
		return small(&l.Columns)
	case "values":
		l.Values = v
	case "pixels":
		return small(&l.Pixels)
	case "images":
		return small(&l.Images)
	default:
		return fmt.Errorf("%w: unknown limit %q (want one of %v)", ErrConfig, key, LimitKeys)
	}
	return nil
}

// LimitError is an input that goes beyond one of its Limits.
type LimitError struct {
	File string
	// Line is the line of a CSV file where the limit was passed (0: not
	// known or not a text file).
	Line int
	// Key names the limit (one of LimitKeys) and Limit is its value.
	Key   string
	Limit int64
	// What says what went beyond it.
	What string
}

func (e *LimitError) Error() string {
	where := e.File
	if e.Line > 0 {
		where = fmt.Sprintf("%s line %d", e.File, e.Line)
	}
	return fmt.Sprintf("data: %s: %s, beyond the %s limit of %d", where, e.What, e.Key, e.Limit)
}

// limitReader passes a stream on while counting its bytes and the length
// of its current line, and fails with a *LimitError once either goes
// beyond its limit.
type limitReader struct {
	r           io.Reader
	name        string
	max         int64
	maxLine     int // 0: lines not counted
	n           int64
	line, lines int // the current line's length so far; lines ended
	err         error
}

func (l *limitReader) Read(p []byte) (int, error) {
	if l.err != nil {
		return 0, l.err
	}
	n, err := l.r.Read(p)
	l.n += int64(n)
	if l.n > l.max {
		l.err = &LimitError{File: l.name, Key: "bytes", Limit: l.max, What: fmt.Sprintf("more than %d bytes (after decompression)", l.max)}
		return 0, l.err
	}
	if l.maxLine > 0 {
		b := p[:n]
		for len(b) > 0 {
			i := bytes.IndexByte(b, '\n')
			seg := i
			if i < 0 {
				seg = len(b)
			}
			if l.line+seg > l.maxLine {
				l.err = &LimitError{File: l.name, Line: l.lines + 1, Key: "line", Limit: int64(l.maxLine), What: fmt.Sprintf("a line longer than %d bytes", l.maxLine)}
				return 0, l.err
			}
			if i < 0 {
				l.line += seg
				break
			}
			l.line, l.lines = 0, l.lines+1
			b = b[i+1:]
		}
	}
	return n, err
}
