package data

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strings"

	"github.com/parquet-go/parquet-go"
)

// FormatParquet is an Apache Parquet file of a flat table.
const FormatParquet Format = "parquet"

// parquetMagic starts (and ends) every Parquet file.
const parquetMagic = "PAR1"

// parquetBatch is the rows a Parquet pass hands on at a time.
const parquetBatch = 4096

// parquetTable is a Parquet file opened for reading runs of rows: the
// feature columns (leaf columns of a flat schema, read as numbers), and
// the row groups, which a shuffled pass reads in a random order.
type parquetTable struct {
	fh      *os.File
	file    *parquet.File
	path    string
	columns []string // the features' names
	leaf    []int    // the features' leaf column indices
}

// openParquet opens path and picks its feature columns: cfg.Columns by
// name, or every leaf column.
func openParquet(path string, cfg CSVConfig) (*parquetTable, error) {
	if cfg.Label != "" || cfg.Keep != nil || cfg.Encoding != nil || cfg.Typed && len(cfg.Types) > 0 {
		return nil, fmt.Errorf("%w: %s: a Parquet table is read for its numbers only (no labels, kept columns, types or a model's encoding)", ErrStream, path)
	}
	fh, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("data: %w", err)
	}
	st, err := fh.Stat()
	if err != nil {
		fh.Close()
		return nil, fmt.Errorf("data: %w", err)
	}
	f, err := openParquetFile(fh, st.Size())
	if err != nil {
		fh.Close()
		return nil, &ParseError{File: path, Msg: "not a readable Parquet file: " + err.Error()}
	}
	t := &parquetTable{fh: fh, file: f, path: path}
	leaves := f.Schema().Columns()
	index := map[string]int{}
	var names []string
	for i, p := range leaves {
		name := strings.Join(p, ".")
		index[name] = i
		names = append(names, name)
	}
	lim, err := cfg.Limits.resolve()
	if err != nil {
		fh.Close()
		return nil, err
	}
	if len(leaves) > lim.Columns {
		fh.Close()
		return nil, &LimitError{File: path, Key: "columns", Limit: int64(lim.Columns), What: fmt.Sprintf("%d columns", len(leaves))}
	}
	want := cfg.Columns
	if want == nil {
		excluded := map[string]bool{}
		for _, c := range cfg.Exclude {
			excluded[c] = true
		}
		for _, n := range names {
			if !excluded[n] {
				want = append(want, n)
			}
		}
	}
	for _, c := range want {
		i, ok := index[c]
		if !ok {
			fh.Close()
			return nil, &ParseError{File: path, Msg: fmt.Sprintf("no column %q (columns: %s)", c, strings.Join(names, ", "))}
		}
		if lc, ok := f.Schema().Lookup(leaves[i]...); ok && lc.MaxRepetitionLevel > 0 {
			fh.Close()
			return nil, &ParseError{File: path, Msg: fmt.Sprintf("column %q is a list, not a number a row", c)}
		}
		t.columns, t.leaf = append(t.columns, c), append(t.leaf, i)
	}
	if len(t.columns) == 0 {
		fh.Close()
		return nil, &ParseError{File: path, Msg: "no feature columns"}
	}
	return t, nil
}

// openParquetFile is parquet.OpenFile, with a failure inside the library
// (a panic, which no file should cause) returned as an error.
func openParquetFile(r io.ReaderAt, size int64) (f *parquet.File, err error) {
	defer func() {
		if p := recover(); p != nil {
			f, err = nil, fmt.Errorf("the reader failed: %v", p)
		}
	}()
	return parquet.OpenFile(r, size)
}

func (t *parquetTable) close() { t.fh.Close() }

// groups is the number of row groups.
func (t *parquetTable) groups() int { return len(t.file.RowGroups()) }

// each reads the row groups in order (nil: the file's), handing f runs of
// rows: x holds rows*len(columns) values, first the 1-based number of
// the run's first row in the file. A cell that is not a number (a text,
// bytes, a null) is an error naming its row and column.
func (t *parquetTable) each(order []int, f func(x []float32, rows, first int) error) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = &ParseError{File: t.path, Msg: fmt.Sprintf("the Parquet reader failed: %v", p)}
		}
	}()
	groups := t.file.RowGroups()
	starts := make([]int, len(groups)+1)
	for i, g := range groups {
		starts[i+1] = starts[i] + int(g.NumRows())
	}
	if order == nil {
		order = make([]int, len(groups))
		for i := range order {
			order[i] = i
		}
	}
	cols := len(t.columns)
	pos := make(map[int]int, cols) // leaf index -> feature place
	for j, l := range t.leaf {
		pos[l] = j
	}
	buf := make([]parquet.Row, parquetBatch)
	x := make([]float32, 0, parquetBatch*cols)
	zero := make([]float32, cols)
	for _, gi := range order {
		rows := groups[gi].Rows()
		row := starts[gi] // rows of the file before this run
		for {
			n, rerr := rows.ReadRows(buf)
			x = x[:0]
			for r := range n {
				start := len(x)
				x = append(x, zero...)
				out := x[start:]
				seen := 0
				for _, v := range buf[r] {
					j, ok := pos[v.Column()]
					if !ok {
						continue
					}
					val, msg := parquetNumber(v)
					if msg != "" {
						rows.Close()
						return &ParseError{File: t.path, Msg: fmt.Sprintf("row %d, column %q: %s (a streamed table holds numbers only: -columns picks the numeric ones)", row+r+1, t.columns[j], msg), text: true}
					}
					out[j] = val
					seen++
				}
				if seen != cols {
					rows.Close()
					return &ParseError{File: t.path, Msg: fmt.Sprintf("row %d holds %d of the %d feature columns' values", row+r+1, seen, cols)}
				}
			}
			if n > 0 {
				if err := f(x, n, row+1); err != nil {
					rows.Close()
					return err
				}
				row += n
			}
			if rerr == io.EOF {
				break
			}
			if rerr != nil {
				rows.Close()
				return &ParseError{File: t.path, Msg: fmt.Sprintf("row group %d: %v", gi+1, rerr)}
			}
		}
		if err := rows.Close(); err != nil {
			return &ParseError{File: t.path, Msg: err.Error()}
		}
	}
	return nil
}

// parquetNumber reads a cell as a float32, or says why it cannot.
func parquetNumber(v parquet.Value) (float32, string) {
	if v.IsNull() {
		return 0, "an empty (null) cell; missing cells need the table in memory"
	}
	var f float64
	switch v.Kind() {
	case parquet.Boolean:
		if v.Boolean() {
			f = 1
		}
	case parquet.Int32:
		f = float64(v.Int32())
	case parquet.Int64:
		f = float64(v.Int64())
	case parquet.Float:
		f = float64(v.Float())
	case parquet.Double:
		f = v.Double()
	default:
		return 0, fmt.Sprintf("a %s value, not a number", strings.ToLower(v.Kind().String()))
	}
	g := float32(f)
	if math.IsNaN(f) || math.IsInf(float64(g), 0) {
		return 0, fmt.Sprintf("%v is not a finite float32 number", f)
	}
	return g, ""
}

// isParquet reports whether path starts and ends with the Parquet magic
// bytes (a CSV file whose first cell is PAR1 does not end with them).
func isParquet(path string) bool {
	fh, err := os.Open(path)
	if err != nil {
		return false
	}
	defer fh.Close()
	st, err := fh.Stat()
	if err != nil || st.Size() < 12 {
		return false
	}
	var head, tail [4]byte
	if _, err := fh.ReadAt(head[:], 0); err != nil {
		return false
	}
	if _, err := fh.ReadAt(tail[:], st.Size()-4); err != nil {
		return false
	}
	return string(head[:]) == parquetMagic && string(tail[:]) == parquetMagic
}

// LoadParquet reads a Parquet file's table of numbers into memory (every
// leaf column, or cfg.Columns), within cfg.Limits' rows and values.
func LoadParquet(path string, cfg CSVConfig) (*Dataset, error) {
	t, err := openParquet(path, cfg)
	if err != nil {
		return nil, err
	}
	defer t.close()
	lim, err := cfg.Limits.resolve()
	if err != nil {
		return nil, err
	}
	d := &Dataset{Cols: len(t.columns), Columns: t.columns}
	err = t.each(nil, func(x []float32, rows, first int) error {
		if d.Rows+rows > lim.Rows {
			return &LimitError{File: path, Key: "rows", Limit: int64(lim.Rows), What: fmt.Sprintf("more than %d rows", lim.Rows)}
		}
		if int64(d.Rows+rows)*int64(d.Cols) > lim.Values {
			return &LimitError{File: path, Key: "values", Limit: lim.Values, What: fmt.Sprintf("more than %d values", lim.Values)}
		}
		d.X = append(d.X, x...)
		d.Rows += rows
		return nil
	})
	var pe *ParseError
	if errors.As(err, &pe) && pe.text {
		pe.Msg = strings.Replace(pe.Msg, "a streamed table holds numbers only", "a Parquet table is read for its numbers", 1)
	}
	if err != nil {
		return nil, err
	}
	if d.Rows == 0 {
		return nil, &ParseError{File: path, Msg: "no data rows"}
	}
	return d, nil
}
