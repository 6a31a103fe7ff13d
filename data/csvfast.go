package data

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"runtime"
	"strconv"
	"strings"
	"unicode/utf8"
	"unsafe"
)

// lineReader reads physical lines and joins them into CSV records.
type lineReader struct {
	br    *bufio.Reader
	name  string
	comma rune
	line  int    // physical lines read
	long  []byte // a line longer than the buffer
	rec   []byte // a record of several lines
	// maxRecord bounds a record of several lines (0: no bound)
	maxRecord int
	// off counts the bytes read; recOff is where the last record began
	off, recOff int64
}

// next returns the next physical line without its line end (\n or
// \r\n), valid until the next call, or io.EOF.
func (lr *lineReader) next() ([]byte, error) {
	b, err := lr.br.ReadSlice('\n')
	if err == bufio.ErrBufferFull {
		lr.long = append(lr.long[:0], b...)
		for err == bufio.ErrBufferFull {
			b, err = lr.br.ReadSlice('\n')
			lr.long = append(lr.long, b...)
		}
		b = lr.long
	}
	if err != nil && err != io.EOF {
		return nil, err
	}
	if len(b) == 0 && err == io.EOF {
		return nil, io.EOF
	}
	lr.off += int64(len(b))
	lr.line++
	b = bytes.TrimSuffix(b, []byte{'\n'})
	b = bytes.TrimSuffix(b, []byte{'\r'})
	return b, nil
}

// record returns the next non-empty record (its lines joined while a
// quoted field is open) and the line it starts on, valid until the next
// call; io.EOF at the end.
func (lr *lineReader) record() ([]byte, int, error) {
	for {
		lr.recOff = lr.off
		b, err := lr.next()
		if err != nil {
			if err == io.EOF {
				return nil, 0, io.EOF
			}
			return nil, 0, csvErr(lr.name, 0, err)
		}
		if len(b) == 0 {
			continue // encoding/csv skips empty lines too
		}
		start := lr.line
		if bytes.Count(b, []byte{'"'})%2 == 0 || !opensQuotedField(b, lr.comma) {
			// balanced quotes, or a stray one that encoding/csv reports
			// on this line (a bare quote): the record is this line
			return b, start, nil
		}
		// a quoted field left open: the record goes on to the next lines,
		// the quote count kept as it grows, up to the line limit
		lr.rec = append(lr.rec[:0], b...)
		odd := true
		for odd {
			more, err := lr.next()
			if err == io.EOF {
				break // encoding/csv reports the open quote
			}
			if err != nil {
				return nil, 0, csvErr(lr.name, 0, err)
			}
			lr.rec = append(append(lr.rec, '\n'), more...)
			if lr.maxRecord > 0 && len(lr.rec) > lr.maxRecord {
				return nil, 0, &LimitError{File: lr.name, Line: start, Key: "line", Limit: int64(lr.maxRecord), What: fmt.Sprintf("a quoted field running past %d bytes from line %d", lr.maxRecord, start)}
			}
			odd = odd != (bytes.Count(more, []byte{'"'})%2 == 1)
		}
		return lr.rec, start, nil
	}
}

// opensQuotedField reports whether a line with an odd number of quotes
// ends inside a quoted field (one whose quote starts the field), as
// encoding/csv reads it; otherwise its quotes are bare and the line is a
// record of its own, which encoding/csv refuses.
func opensQuotedField(line []byte, comma rune) bool {
	cr := csv.NewReader(bytes.NewReader(line))
	cr.Comma = comma
	cr.FieldsPerRecord = -1
	_, err := cr.Read()
	var pe *csv.ParseError
	return errors.As(err, &pe) && errors.Is(pe.Err, csv.ErrQuote)
}

// fields splits one record for the header.
func (lr *lineReader) fields(rec []byte, line int) ([]string, error) {
	return splitRecord(nil, rec, lr.comma, lr.name, line)
}

// unsafeString views b as a string without copying; b must not change
// while the string is in use.
func unsafeString(b []byte) string {
	if len(b) == 0 {
		return ""
	}
	return unsafe.String(&b[0], len(b))
}

// splitRecord splits a record into fields: at the separator directly when
// it has no quote (the fields view rec), through encoding/csv otherwise.
func splitRecord(dst []string, rec []byte, comma rune, name string, line int) ([]string, error) {
	dst = dst[:0]
	if comma < utf8.RuneSelf && bytes.IndexByte(rec, '"') < 0 {
		c := byte(comma)
		for {
			i := bytes.IndexByte(rec, c)
			if i < 0 {
				return append(dst, unsafeString(rec)), nil
			}
			dst = append(dst, unsafeString(rec[:i]))
			rec = rec[i+1:]
		}
	}
	cr := csv.NewReader(bytes.NewReader(rec))
	cr.Comma = comma
	cr.FieldsPerRecord = -1
	f, err := cr.Read()
	if err != nil {
		var pe *csv.ParseError
		if errors.As(err, &pe) {
			if pe.StartLine != pe.Line {
				// a quoted field that runs on: name the line it opens on
				return nil, &ParseError{File: name, Line: line + pe.StartLine - 1, Msg: fmt.Sprintf("%v (a quoted field opened on this line runs to line %d)", pe.Err, line+pe.Line-1)}
			}
			return nil, &ParseError{File: name, Line: line + pe.Line - 1, Column: pe.Column, Msg: pe.Err.Error()}
		}
		return nil, &ParseError{File: name, Line: line, Msg: err.Error()}
	}
	return append(dst, f...), nil
}

// csvBatch is a run of records read together and parsed by one worker.
type csvBatch struct {
	text   []byte
	ends   []int   // each record's end in text
	starts []int   // each record's first line
	offs   []int64 // each record's first byte in the text read
	// results
	x        []float32
	labels   []int
	kept     []string
	rowLines []int           // the line of each parsed row
	rowOffs  []int64         // the first byte of each parsed row
	notes    []RowNote       // an encoding pass's notes, Row counted in the batch
	survey   []*columnSurvey // a survey pass's counts of this batch
	stats    *columnStats    // a typed reading's numbers: each column's range
	err      error
}

// batchBytes and batchRecords cut batches: a few mebibytes of text, so
// memory in flight stays small whatever the file.
const (
	batchBytes   = 2 << 20
	batchRecords = 16384
)

func (b *csvBatch) add(rec []byte, line int, off int64) {
	b.text = append(b.text, rec...)
	b.ends = append(b.ends, len(b.text))
	b.starts = append(b.starts, line)
	b.offs = append(b.offs, off)
}

func (b *csvBatch) full() bool { return len(b.text) >= batchBytes || len(b.ends) >= batchRecords }

// rowParser turns records into rows of the selected columns.
type rowParser struct {
	name   string
	header []string
	sel    []int
	keep   []int
	label  int
	width  int
	lr     *lineReader
	size   int64 // the text's bytes, -1 when unknown
	pass   *typedPass
	cfg    *CSVConfig
	emit   func(b *csvBatch, d *Dataset) error
}

// parse parses a batch's records into its rows, stopping at the first
// bad record.
func (p *rowParser) parse(b *csvBatch) {
	var fields, cells []string
	prev := 0
	var missing func(string) bool
	maxLevels := cmpOrInt(p.cfg.MaxLevels, DefaultMaxLevels)
	if p.cfg.Typed && p.pass == nil && p.cfg.Encoding == nil {
		b.stats = newColumnStats(len(p.sel))
	}
	switch {
	case p.pass != nil && p.pass.cells != nil:
		b.x = make([]float32, 0, len(b.ends)*p.pass.cells.e.Width())
	case p.pass != nil:
		b.survey = make([]*columnSurvey, len(p.sel))
		for i := range b.survey {
			b.survey[i] = newColumnSurvey()
		}
		markers := map[string]bool{}
		for _, m := range markersOf(p.cfg) {
			markers[m] = true
		}
		missing = func(s string) bool { return s == "" || markers[s] }
	default:
		b.x = make([]float32, 0, len(b.ends)*len(p.sel))
	}
	for k, end := range b.ends {
		rec := b.text[prev:end]
		prev = end
		line := b.starts[k]
		var err error
		if fields, err = splitRecord(fields, rec, p.lr.comma, p.name, line); err != nil {
			b.err = err
			return
		}
		if len(fields) == 1 && strings.TrimSpace(fields[0]) == "" && p.width > 1 {
			continue // a blank line
		}
		if len(fields) != p.width {
			b.err = &ParseError{File: p.name, Line: line, Msg: fmt.Sprintf("row has %d fields, want %d", len(fields), p.width)}
			return
		}
		switch {
		case p.pass != nil && p.pass.cells != nil:
			cells = cells[:0]
			for _, i := range p.sel {
				cells = append(cells, strings.TrimSpace(fields[i]))
			}
			var note string
			var unscorable bool
			b.x, note, unscorable = p.pass.cells.row(b.x, cells)
			if note != "" {
				b.notes = append(b.notes, RowNote{Row: len(b.rowLines), Line: line, Text: note, Unscorable: unscorable})
			}
		case p.pass != nil:
			for k, i := range p.sel {
				b.survey[k].add(strings.TrimSpace(fields[i]), line, missing, maxLevels)
			}
		}
		for k, i := range p.sel {
			if p.pass != nil {
				break
			}
			s := strings.TrimSpace(fields[i])
			v, err := parseFloat32(s)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				msg := fmt.Sprintf("%q is not a finite number", s)
				if errors.Is(err, strconv.ErrRange) {
					msg = fmt.Sprintf("%q is outside the float32 range", s)
				}
				b.err = &ParseError{File: p.name, Line: line, Column: i + 1, Name: p.header[i], Msg: msg, text: !errors.Is(err, strconv.ErrRange)}
				return
			}
			b.x = append(b.x, float32(v))
			if b.stats != nil {
				b.stats.add(k, float32(v))
			}
		}
		if p.label >= 0 {
			s := strings.TrimSpace(fields[p.label])
			if s == "" {
				b.labels = append(b.labels, Unlabelled)
			} else {
				v, err := strconv.Atoi(s)
				if err != nil || v < 0 {
					// accept integral floats such as "3.0"
					fv, ferr := strconv.ParseFloat(s, 64)
					if ferr != nil || fv != math.Trunc(fv) || fv < 0 || fv > 1<<30 {
						b.err = &ParseError{File: p.name, Line: line, Column: p.label + 1, Name: p.header[p.label], Msg: fmt.Sprintf("label %q is not a class index >= 0", s)}
						return
					}
					v = int(fv)
				}
				b.labels = append(b.labels, v)
			}
		}
		for _, i := range p.keep {
			b.kept = append(b.kept, strings.Clone(fields[i])) // fields view the batch
		}
		b.rowLines = append(b.rowLines, line)
		b.rowOffs = append(b.rowOffs, b.offs[k])
	}
}

// readAll reads the rest of the records in batches, parses them on every
// core and appends their rows to d in file order; first, when not nil,
// is a batch already begun. The first problem in file order is returned:
// a bad record, or the row past a limit.
func (p *rowParser) readAll(d *Dataset, lim Limits, first *csvBatch) error {
	workers := max(1, runtime.GOMAXPROCS(0))
	type job struct {
		b    *csvBatch
		done chan struct{}
	}
	var queue []job
	sem := make(chan struct{}, workers)
	// the caller returns only after every worker has finished (a worker
	// may view memory of a batch)
	defer func() {
		for _, j := range queue {
			<-j.done
		}
	}()
	assemble := func(j job) error {
		<-j.done
		b := j.b
		n := len(b.rowLines)
		if p.emit != nil {
			// a stream's pass: the rows go on, none is held (the bad
			// record's values, parsed before its bad cell, do not)
			if n > 0 {
				if len(b.x) > n*d.Cols {
					b.x = b.x[:n*d.Cols]
				}
				if err := p.emit(b, d); err != nil {
					return err
				}
			}
			d.Rows += n
			return b.err
		}
		if d.Rows+n > lim.Rows {
			k := lim.Rows - d.Rows
			return &LimitError{File: p.name, Line: b.rowLines[k], Key: "rows", Limit: int64(lim.Rows), What: fmt.Sprintf("more than %d rows", lim.Rows)}
		}
		if int64(d.Rows+n)*int64(d.Cols) > lim.Values {
			k := int(lim.Values/int64(d.Cols)) - d.Rows
			return &LimitError{File: p.name, Line: b.rowLines[k], Key: "values", Limit: lim.Values, What: fmt.Sprintf("more than %d values (%d rows of %d)", lim.Values, d.Rows+k+1, d.Cols)}
		}
		if d.Rows == 0 && p.size > 0 && n > 0 {
			// set the rows aside at once, from this batch's bytes per
			// row and the file's size (5% over, within the limits); a
			// wrong guess only costs the growth it was to avoid
			perRow := float64(len(b.text)+len(b.ends)) / float64(n)
			est := int64(float64(p.size)/perRow*1.05) + int64(n)
			est = min(est, int64(lim.Rows), lim.Values/int64(d.Cols))
			d.X = make([]float32, 0, est*int64(d.Cols))
		}
		d.X = append(d.X, b.x...)
		if d.Labels != nil {
			d.Labels = append(d.Labels, b.labels...)
		}
		d.Kept = append(d.Kept, b.kept...)
		if b.stats != nil && n > 0 {
			if d.stats == nil {
				d.stats = newColumnStats(d.Cols)
			}
			d.stats.merge(b.stats)
		}
		for _, nt := range b.notes {
			nt.Row += d.Rows
			d.Notes = append(d.Notes, nt)
		}
		if p.pass != nil && b.survey != nil {
			for k, c := range b.survey {
				p.pass.survey[k].merge(c, cmpOrInt(p.cfg.MaxLevels, DefaultMaxLevels))
			}
		}
		d.Rows += n
		return b.err
	}
	launch := func(b *csvBatch) {
		j := job{b: b, done: make(chan struct{})}
		queue = append(queue, j)
		sem <- struct{}{}
		go func() {
			defer func() { <-sem; close(j.done) }()
			p.parse(b)
		}()
	}
	b := first
	if b == nil {
		b = &csvBatch{}
	}
	for {
		rec, line, err := p.lr.record()
		if err != nil && err != io.EOF {
			// a read error (a limit) comes after every record before it
			for len(queue) > 0 {
				j := queue[0]
				queue = queue[1:]
				if err := assemble(j); err != nil {
					return err
				}
			}
			if len(b.ends) > 0 {
				launch(b)
				j := queue[0]
				queue = queue[1:]
				if err := assemble(j); err != nil {
					return err
				}
			}
			return err
		}
		if err == nil {
			b.add(rec, line, p.lr.recOff)
		}
		if len(b.ends) > 0 && (err == io.EOF || b.full()) {
			launch(b)
			b = &csvBatch{}
		}
		for len(queue) > workers || (err == io.EOF && len(queue) > 0) {
			j := queue[0]
			queue = queue[1:]
			if err := assemble(j); err != nil {
				return err
			}
		}
		if err == io.EOF {
			return nil
		}
	}
}

// pow10f32 holds the powers of ten that float32 represents exactly.
var pow10f32 = [...]float32{1, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10}

// parseFloat32 is strconv.ParseFloat(s, 32) for finite values, with a
// fast path for the common plain decimals ("-12.3456"): when the digits
// make an integer below 2^24 and at most ten of them follow the point,
// the integer and the power of ten are both exact in float32, so one
// IEEE division rounds correctly (the fast path of Clinger, "How to read
// floating point numbers accurately", 1990) and the result is the one
// strconv gives, bit for bit (tested against it).
func parseFloat32(s string) (float64, error) {
	if v, ok := fastFloat32(s); ok {
		return float64(v), nil
	}
	return strconv.ParseFloat(s, 32)
}

func fastFloat32(s string) (float32, bool) {
	i, neg := 0, false
	if i < len(s) && (s[i] == '-' || s[i] == '+') {
		neg = s[i] == '-'
		i++
	}
	var m uint32
	digits, frac, seenDot := 0, 0, false
	for ; i < len(s); i++ {
		c := s[i]
		switch {
		case c >= '0' && c <= '9':
			m = m*10 + uint32(c-'0')
			digits++
			if seenDot {
				frac++
			}
			if m >= 1<<24 || digits > 9 {
				return 0, false
			}
		case c == '.' && !seenDot:
			seenDot = true
		default:
			return 0, false // an exponent, a letter, a second point
		}
	}
	if digits == 0 || frac >= len(pow10f32) {
		return 0, false
	}
	v := float32(m) / pow10f32[frac]
	if neg {
		v = -v
	}
	return v, true
}
