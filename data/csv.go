package data

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"github.com/klauspost/compress/gzip"
	"io"
	"os"
	"strconv"
	"strings"
)

// ParseError reports bad input with its place: the file, the 1-based line
// and column (0 when not applicable) and what was wrong.
type ParseError struct {
	File   string
	Line   int
	Column int
	Name   string // column name, when known
	Msg    string
	// text: a cell that is not a number (a typed reading takes it)
	text bool
}

func (e *ParseError) Error() string {
	var b strings.Builder
	b.WriteString("data: ")
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	if e.Column > 0 {
		fmt.Fprintf(&b, ": column %d", e.Column)
		if e.Name != "" {
			fmt.Fprintf(&b, " (%s)", e.Name)
		}
	}
	b.WriteString(": ")
	b.WriteString(e.Msg)
	return b.String()
}

// CSVConfig selects how a CSV file is read. Zero fields mean: the first line
// (after SkipLines) is a header; every column except Label is a feature;
// no labels.
type CSVConfig struct {
	// NoHeader says the file has no header line; columns are then named
	// c0, c1, ... for selection.
	NoHeader bool
	// SkipLines skips that many lines before the header (or the data).
	SkipLines int
	// Columns selects feature columns by name, in this order; nil means
	// all columns but the label.
	Columns []string
	// Label names the column holding integer class labels; an empty cell
	// there marks the row unlabelled. Empty means no labels.
	Label string
	// Keep names columns whose text is kept, as it is, in
	// Dataset.Kept (for passing through to an output); they may also be
	// features. Nil keeps none.
	Keep []string
	// Exclude names columns that are not features when Columns is nil
	// (a label read through Keep, say).
	Exclude []string
	// Comma is the field separator; 0 finds it from the first line read
	// (the header, or the first row without one): whichever of comma,
	// semicolon, tab and vertical bar occurs most often outside quotes,
	// comma when none does.
	Comma rune
	// Limits caps the file's size, line length, rows and columns.
	Limits Limits
	// Progress, when not nil, is told how much of the file has been read.
	Progress Progress
	// Typed reads the feature columns by type: numbers, integers,
	// booleans and text categories, with missing cells, and sets the
	// Dataset's Encoding to say how (see Encoding). A table whose feature
	// cells are all numbers is read in one pass; any other takes three
	// (the numbers tried, the columns surveyed, the rows encoded).
	// Without Typed every feature cell must be a finite number.
	Typed bool
	// Types gives the type of the named columns instead of the one
	// inferred (Typed only).
	Types map[string]FieldType
	// Missing lists the texts that mark a missing cell besides the empty
	// cell (Typed only); nil means DefaultMissing.
	Missing []string
	// MaxLevels caps a categorical column's distinct values (Typed only;
	// 0: DefaultMaxLevels).
	MaxLevels int
	// Encoding reads the file by a model's encoding: its fields by name
	// (by position with NoHeader; Columns, when set, gives the file's
	// names for the fields in their order), each cell encoded as it says;
	// a cell it cannot read is filled in and noted (Dataset.Notes), never
	// an error. Typed is then ignored.
	Encoding *Encoding

	// pass is the typed reading's pass (internal)
	pass *typedPass
	// emit, when set, takes each run of parsed rows in file order
	// instead of the Dataset (a Stream's pass); the rows and values
	// limits, which bound what is held, do not apply
	emit func(b *csvBatch, d *Dataset) error
}

// typedPass is one pass of a typed reading: a survey of the columns, or
// the rows encoded.
type typedPass struct {
	survey   []*columnSurvey // filled by a survey pass
	cols     []int           // the surveyed columns' 1-based places in the file
	cells    *cellReader     // set for an encoding pass
	training bool
}

// LoadCSV reads a CSV file (plain or gzip-compressed, told apart by
// content) into a Dataset. Every feature cell must parse as a finite
// number; a non-numeric cell, NaN, infinity, a value outside float32 range
// or a row with the wrong number of fields is a *ParseError naming the
// line and column.
func LoadCSV(path string, cfg CSVConfig) (*Dataset, error) {
	return readTyped(func(cfg CSVConfig) (*Dataset, error) {
		f, err := os.Open(path)
		if err != nil {
			return nil, fmt.Errorf("data: %w", err)
		}
		defer f.Close()
		r, gz, err := maybeGzip(withProgress(f, cfg.Progress))
		if err != nil {
			return nil, &ParseError{File: path, Msg: err.Error()}
		}
		size := int64(-1)
		if st, err := f.Stat(); err == nil && st.Mode().IsRegular() && !gz {
			size = st.Size()
		}
		return readCSV(r, path, cfg, size)
	}, path, cfg)
}

// maybeGzip returns a reader that decompresses r when it starts with
// the gzip magic bytes, and says whether it does.
func maybeGzip(r io.Reader) (io.Reader, bool, error) {
	br := bufio.NewReader(r)
	head, _ := br.Peek(2)
	if len(head) == 2 && head[0] == 0x1f && head[1] == 0x8b {
		zr, err := gzip.NewReader(br)
		return zr, true, err
	}
	return br, false, nil
}

// ReadCSVStream is ReadCSV on a stream that may be gzip-compressed (told
// apart by content), such as standard input.
func ReadCSVStream(r io.Reader, name string, cfg CSVConfig) (*Dataset, error) {
	zr, _, err := maybeGzip(r)
	if err != nil {
		return nil, &ParseError{File: name, Msg: err.Error()}
	}
	if !cfg.Typed || cfg.Encoding != nil {
		return readCSV(zr, name, cfg, -1)
	}
	// a typed reading may take more than one pass: the text is kept
	// (within the byte limit)
	lim, err := cfg.Limits.resolve()
	if err != nil {
		return nil, err
	}
	text, err := io.ReadAll(&limitReader{r: zr, name: name, max: lim.Bytes, maxLine: lim.Line})
	if err != nil {
		return nil, csvErr(name, 0, err)
	}
	return readTyped(func(cfg CSVConfig) (*Dataset, error) {
		return readCSV(bytes.NewReader(text), name, cfg, int64(len(text)))
	}, name, cfg)
}

// sniffSeparator picks a line's field separator: the most frequent of
// comma, semicolon, tab and vertical bar outside double quotes, comma on
// a tie or when none occurs.
func sniffSeparator(line []byte) rune {
	counts := map[byte]int{}
	quoted := false
	for _, c := range line {
		switch {
		case c == '"':
			quoted = !quoted
		case !quoted && (c == ',' || c == ';' || c == '\t' || c == '|'):
			counts[c]++
		}
	}
	best := byte(',')
	for _, c := range []byte{';', '\t', '|'} {
		if counts[c] > counts[best] {
			best = c
		}
	}
	return rune(best)
}

// ReadCSV is LoadCSV on a reader; name is used in errors.
//
// Records are read a batch at a time and parsed on every core, straight
// into the float32 rows, in file order (see csvfast.go): a record without
// a quote is split at its separators directly, one with quotes (which may
// span lines) goes through encoding/csv.
func ReadCSV(r io.Reader, name string, cfg CSVConfig) (*Dataset, error) {
	return ReadCSVStream(r, name, cfg)
}

// readCSV is ReadCSV knowing the text's size in bytes (-1: unknown), so
// that the rows can be set aside at once from the first batch's density
// rather than grown by copies.
func readCSV(r io.Reader, name string, cfg CSVConfig, size int64) (*Dataset, error) {
	if cfg.SkipLines < 0 {
		return nil, fmt.Errorf("%w: SkipLines %d", ErrConfig, cfg.SkipLines)
	}
	lim, err := cfg.Limits.resolve()
	if err != nil {
		return nil, err
	}
	comma := cfg.Comma
	if comma == 0 {
		comma = ','
	}
	lr := &lineReader{br: bufio.NewReaderSize(&limitReader{r: r, name: name, max: lim.Bytes, maxLine: lim.Line}, 1<<16), name: name, comma: comma, maxRecord: lim.Line}
	for i := 0; i < cfg.SkipLines; i++ {
		if _, err := lr.next(); err != nil {
			if err == io.EOF {
				return nil, &ParseError{File: name, Line: lr.line + 1, Msg: "file ends before the lines to skip"}
			}
			return nil, csvErr(name, 0, err)
		}
	}
	first, firstLine, err := lr.record()
	firstOff := lr.recOff
	if err == io.EOF {
		return nil, &ParseError{File: name, Line: lr.line + 1, Msg: "no data"}
	}
	if err != nil {
		return nil, err
	}
	if cfg.Comma == 0 {
		lr.comma = sniffSeparator(first)
	}
	if cfg.SkipLines == 0 {
		// a byte-order mark is no part of the first field
		first = bytes.TrimPrefix(first, []byte("\ufeff"))
	}
	rec, err := lr.fields(first, firstLine)
	if err != nil {
		return nil, err
	}
	for i := range rec {
		rec[i] = strings.Clone(rec[i]) // fields may view the line buffer
	}
	width := len(rec)
	if width > lim.Columns {
		return nil, &LimitError{File: name, Line: firstLine, Key: "columns", Limit: int64(lim.Columns), What: fmt.Sprintf("%d columns", width)}
	}
	header := make([]string, width)
	if cfg.NoHeader {
		for i := range header {
			header[i] = "c" + strconv.Itoa(i)
		}
	} else {
		for i, h := range rec {
			header[i] = strings.TrimSpace(h)
		}
	}
	index := map[string]int{}
	for i, h := range header {
		if _, dup := index[h]; dup && h != "" {
			msg := "duplicate column name"
			if _, kind := classify(h); kind == cellNumber {
				msg += " (the first line holds numbers: a file without a header? say so with -no-header)"
			}
			return nil, &ParseError{File: name, Line: firstLine, Column: i + 1, Name: h, Msg: msg}
		}
		index[h] = i
	}
	label := -1
	if cfg.Label != "" {
		i, ok := index[cfg.Label]
		if !ok {
			return nil, &ParseError{File: name, Line: firstLine, Msg: fmt.Sprintf("no label column %q (columns: %s)", cfg.Label, strings.Join(header, ", "))}
		}
		label = i
	}
	var sel []int
	if cfg.Encoding != nil {
		switch {
		case cfg.Columns == nil:
			cfg.Columns = cfg.Encoding.Names()
		case len(cfg.Columns) != len(cfg.Encoding.Fields):
			// the file's names for the fields, in their order
			return nil, fmt.Errorf("%w: %d columns named for the %d the model reads (%s)", ErrConfig, len(cfg.Columns), len(cfg.Encoding.Fields), strings.Join(cfg.Encoding.Names(), ", "))
		}
		if cfg.NoHeader {
			// by position: the file's first columns are the fields
			if width < len(cfg.Columns) {
				return nil, &ParseError{File: name, Line: firstLine, Msg: fmt.Sprintf("%d columns, the model reads %d", width, len(cfg.Columns))}
			}
			for i := range cfg.Columns {
				index[cfg.Columns[i]] = i
			}
		}
	}
	if cfg.Columns != nil {
		for _, c := range cfg.Columns {
			i, ok := index[c]
			if !ok {
				return nil, &ParseError{File: name, Line: firstLine, Msg: fmt.Sprintf("no column %q", c)}
			}
			if i == label {
				return nil, fmt.Errorf("%w: column %q is both a feature and the label", ErrConfig, c)
			}
			sel = append(sel, i)
		}
	} else {
		excluded := map[string]bool{}
		for _, c := range cfg.Exclude {
			excluded[c] = true
		}
		for i, h := range header {
			if i != label && !excluded[h] {
				sel = append(sel, i)
			}
		}
	}
	if len(sel) == 0 {
		return nil, &ParseError{File: name, Line: firstLine, Msg: "no feature columns"}
	}
	d := &Dataset{Cols: len(sel)}
	for _, i := range sel {
		d.Columns = append(d.Columns, header[i])
	}
	pass := cfg.pass
	if cfg.Encoding != nil {
		if pass == nil {
			pass = &typedPass{}
		}
		pass.cells = newCellReader(cfg.Encoding, pass.training)
		d.Cols, d.Columns, d.Encoding = cfg.Encoding.Width(), cfg.Encoding.Columns(), cfg.Encoding
	}
	if pass != nil && pass.cells == nil {
		// a survey: the columns are counted, no rows kept
		pass.survey = make([]*columnSurvey, len(sel))
		for i := range pass.survey {
			pass.survey[i] = newColumnSurvey()
			pass.cols = append(pass.cols, sel[i]+1)
		}
	}
	var keep []int
	for _, c := range cfg.Keep {
		i, ok := index[c]
		if !ok {
			return nil, &ParseError{File: name, Line: firstLine, Msg: fmt.Sprintf("the column %q to keep is not in the header (columns: %s)", c, strings.Join(header, ", "))}
		}
		keep = append(keep, i)
		d.KeptColumns = append(d.KeptColumns, header[i])
	}
	if label >= 0 {
		d.Labels = []int{}
	}
	p := &rowParser{name: name, header: header, sel: sel, keep: keep, label: label, width: width, lr: lr, size: size, pass: pass, cfg: &cfg, emit: cfg.emit}
	var pending *csvBatch
	if cfg.NoHeader {
		// the first record is a row
		pending = &csvBatch{}
		pending.add(first, firstLine, firstOff)
	}
	if err := p.readAll(d, lim, pending); err != nil {
		return nil, err
	}
	if d.Rows == 0 {
		return nil, &ParseError{File: name, Msg: "no data rows"}
	}
	return d, nil
}

func csvErr(name string, skipped int, err error) error {
	var le *LimitError
	if errors.As(err, &le) {
		return le
	}
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return &ParseError{File: name, Line: pe.Line + skipped, Column: pe.Column, Msg: pe.Err.Error()}
	}
	return &ParseError{File: name, Msg: err.Error()}
}
