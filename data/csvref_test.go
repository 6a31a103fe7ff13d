package data

import (
	"bufio"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// readCSVReference is the reader before the batched one: every record
// through encoding/csv, one at a time. The tests hold ReadCSV to it.
func readCSVReference(r io.Reader, name string, cfg CSVConfig) (*Dataset, error) {
	if cfg.SkipLines < 0 {
		return nil, fmt.Errorf("%w: SkipLines %d", ErrConfig, cfg.SkipLines)
	}
	lim, err := cfg.Limits.resolve()
	if err != nil {
		return nil, err
	}
	br := bufio.NewReader(&limitReader{r: r, name: name, max: lim.Bytes, maxLine: lim.Line})
	line := 0
	for i := 0; i < cfg.SkipLines; i++ {
		if _, err := br.ReadString('\n'); err != nil {
			return nil, &ParseError{File: name, Line: line + 1, Msg: "file ends before the lines to skip"}
		}
		line++
	}
	cr := csv.NewReader(br)
	cr.FieldsPerRecord = -1
	cr.ReuseRecord = true
	if cfg.Comma != 0 {
		cr.Comma = cfg.Comma
	}
	pos := func() int { l, _ := cr.FieldPos(0); return l + line }
	var header []string
	rec, err := cr.Read()
	if err == io.EOF {
		return nil, &ParseError{File: name, Line: line + 1, Msg: "no data"}
	}
	if err != nil {
		return nil, csvErr(name, line, err)
	}
	width := len(rec)
	if width > lim.Columns {
		return nil, &LimitError{File: name, Line: pos(), Key: "columns", Limit: int64(lim.Columns), What: fmt.Sprintf("%d columns", width)}
	}
	if len(rec) > 0 && line == 0 {
		// a byte-order mark is no part of the first column's name
		rec[0] = strings.TrimPrefix(rec[0], "\ufeff")
	}
	if cfg.NoHeader {
		header = make([]string, width)
		for i := range header {
			header[i] = "c" + strconv.Itoa(i)
		}
	} else {
		header = make([]string, width)
		for i, h := range rec {
			header[i] = strings.TrimSpace(h)
		}
		rec = nil
	}
	index := map[string]int{}
	for i, h := range header {
		if _, dup := index[h]; dup && h != "" {
			return nil, &ParseError{File: name, Line: line + 1, Column: i + 1, Name: h, Msg: "duplicate column name"}
		}
		index[h] = i
	}
	label := -1
	if cfg.Label != "" {
		i, ok := index[cfg.Label]
		if !ok {
			return nil, &ParseError{File: name, Line: line + 1, Msg: fmt.Sprintf("no label column %q (columns: %s)", cfg.Label, strings.Join(header, ", "))}
		}
		label = i
	}
	var sel []int
	if cfg.Columns != nil {
		for _, c := range cfg.Columns {
			i, ok := index[c]
			if !ok {
				return nil, &ParseError{File: name, Line: line + 1, Msg: fmt.Sprintf("no column %q", c)}
			}
			if i == label {
				return nil, fmt.Errorf("%w: column %q is both a feature and the label", ErrConfig, c)
			}
			sel = append(sel, i)
		}
	} else {
		for i := range header {
			if i != label {
				sel = append(sel, i)
			}
		}
	}
	if len(sel) == 0 {
		return nil, &ParseError{File: name, Line: line + 1, Msg: "no feature columns"}
	}
	d := &Dataset{Cols: len(sel)}
	for _, i := range sel {
		d.Columns = append(d.Columns, header[i])
	}
	if label >= 0 {
		d.Labels = []int{}
	}
	parseRow := func(rec []string) error {
		l := pos()
		if d.Rows >= lim.Rows {
			return &LimitError{File: name, Line: l, Key: "rows", Limit: int64(lim.Rows), What: fmt.Sprintf("more than %d rows", lim.Rows)}
		}
		if int64(d.Rows+1)*int64(d.Cols) > lim.Values {
			return &LimitError{File: name, Line: l, Key: "values", Limit: lim.Values, What: fmt.Sprintf("more than %d values (%d rows of %d)", lim.Values, d.Rows+1, d.Cols)}
		}
		if len(rec) != width {
			return &ParseError{File: name, Line: l, Msg: fmt.Sprintf("row has %d fields, want %d", len(rec), width)}
		}
		for _, i := range sel {
			s := strings.TrimSpace(rec[i])
			v, err := strconv.ParseFloat(s, 32)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				msg := fmt.Sprintf("%q is not a finite number", s)
				if errors.Is(err, strconv.ErrRange) {
					msg = fmt.Sprintf("%q is outside the float32 range", s)
				}
				return &ParseError{File: name, Line: l, Column: i + 1, Name: header[i], Msg: msg}
			}
			d.X = append(d.X, float32(v))
		}
		if label >= 0 {
			s := strings.TrimSpace(rec[label])
			if s == "" {
				d.Labels = append(d.Labels, Unlabelled)
			} else {
				v, err := strconv.Atoi(s)
				if err != nil || v < 0 {
					// accept integral floats such as "3.0"
					fv, ferr := strconv.ParseFloat(s, 64)
					if ferr != nil || fv != math.Trunc(fv) || fv < 0 || fv > 1<<30 {
						return &ParseError{File: name, Line: l, Column: label + 1, Name: header[label], Msg: fmt.Sprintf("label %q is not a class index >= 0", s)}
					}
					v = int(fv)
				}
				d.Labels = append(d.Labels, v)
			}
		}
		d.Rows++
		return nil
	}
	if rec != nil {
		if err := parseRow(rec); err != nil {
			return nil, err
		}
	}
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, csvErr(name, line, err)
		}
		if len(rec) == 1 && strings.TrimSpace(rec[0]) == "" && width > 1 {
			continue // blank line
		}
		if err := parseRow(rec); err != nil {
			return nil, err
		}
	}
	if d.Rows == 0 {
		return nil, &ParseError{File: name, Msg: "no data rows"}
	}
	return d, nil
}
