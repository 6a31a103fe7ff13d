package main

import (
	"errors"
	"flag"
	"fmt"
	"math"
	"os"
	"strconv"
	"strings"
	"sync"

	"github.com/quernlab/quern/data"
)

// dataFlags are the input options shared by the commands that read data.
type dataFlags struct {
	path     string
	labels   string // idx label file
	label    string // CSV label column
	columns  string
	noHeader bool
	skip     int
	grey     bool
	limits   limitFlag
	keep     string // CSV columns kept as text (score's -keep)
	exclude  string // CSV columns that are not features (evaluate's text label)
	delim    string
	// a training read: CSV columns by type (see registerTyped)
	typed   bool
	types   string
	missing string
	// a model's encoding to read a CSV by (loadFor)
	enc *data.Encoding
	// phase names the status line's loading phase ("" : load)
	phase string
}

// loadPhase is the name of the loading phase.
func (d *dataFlags) loadPhase() string {
	if d.phase != "" {
		return d.phase
	}
	return "load"
}

// registerForModel adds the data flags of a command that reads rows for
// a trained model, which names its columns.
func (d *dataFlags) registerForModel(fs *flag.FlagSet) {
	d.register(fs, true)
	fs.Lookup("columns").Usage = "comma-separated CSV columns: the file's names for the model's columns, in the model's order (default: the model's own names, read in any order; quern inspect lists them)"
}

// registerTyped adds the flags of a training read, which infers the CSV
// columns' types.
func (d *dataFlags) registerTyped(fs *flag.FlagSet) {
	d.typed = true
	fs.StringVar(&d.types, "types", "", "CSV column types instead of the inferred ones, `COLUMN=TYPE,...` with TYPE numeric, integer, boolean or categorical (inferred: numbers, whole numbers, two texts such as yes/no, other texts)")
	fs.StringVar(&d.missing, "missing", "", "comma-separated texts that mark a missing CSV cell besides the empty cell (default NA,N/A,NaN,nan,?,null,NULL); none: only the empty cell")
}

func (d *dataFlags) register(fs *flag.FlagSet, required bool) {
	what := "input data: a CSV file (plain or gzip; - reads standard input), a Parquet file (a table of numbers), an idx file (raw or gzip) or a folder of PNG images, told apart by content"
	if required {
		what += " (required)"
	}
	fs.StringVar(&d.path, "data", "", what)
	fs.StringVar(&d.labels, "labels", "", "idx file of labels for idx data")
	fs.StringVar(&d.label, "label", "", "CSV column holding integer class labels (empty cells: unlabelled)")
	fs.StringVar(&d.columns, "columns", "", "comma-separated CSV feature columns (default: all but the label)")
	fs.BoolVar(&d.noHeader, "no-header", false, "the CSV file has no header line (columns are then named c0, c1, ...)")
	fs.IntVar(&d.skip, "skip", 0, "CSV lines to skip before the header")
	fs.StringVar(&d.delim, "delimiter", "", "CSV field separator: a character, or tab (default: found from the first line among , ; tab and |)")
	fs.BoolVar(&d.grey, "grey", false, "read PNG images as one grey channel")
	fs.Var(&d.limits, "limit", fmt.Sprintf("raise (or lower) a cap on the input, `KEY=N` with N a count or bytes (suffixes K, M, G, T: powers of 1024); repeatable. Keys and defaults: bytes=%s (after decompression), line=%s (one CSV line), rows=%d, columns=%d (per row), values=%d (rows x columns), pixels=%d (per image), images=%d",
		sizeString(data.DefaultBytes), sizeString(data.DefaultLine), data.DefaultRows, data.DefaultColumns, data.DefaultValues, data.DefaultPixels, data.DefaultImages))
}

// limitFlag is the repeatable -limit KEY=N flag.
type limitFlag struct {
	l    data.Limits
	text []string
}

func (f *limitFlag) String() string { return strings.Join(f.text, ",") }

func (f *limitFlag) Set(s string) error {
	for _, kv := range splitList(s) {
		key, val, ok := strings.Cut(kv, "=")
		if !ok {
			return fmt.Errorf("%q: want KEY=N (keys: %s)", kv, strings.Join(data.LimitKeys, ", "))
		}
		n, err := parseSize(val)
		if err != nil {
			return fmt.Errorf("%s: %v", kv, err)
		}
		if err := f.l.Set(strings.TrimSpace(key), n); err != nil {
			return errors.New(strings.TrimPrefix(err.Error(), "data: invalid configuration: "))
		}
		f.text = append(f.text, strings.TrimSpace(key)+"="+strings.TrimSpace(val))
	}
	return nil
}

// parseSize reads a positive count with an optional binary suffix.
func parseSize(s string) (int64, error) {
	s = strings.TrimSpace(s)
	mult := int64(1)
	if n := len(s); n > 0 {
		switch s[n-1] {
		case 'K', 'k':
			mult = 1 << 10
		case 'M', 'm':
			mult = 1 << 20
		case 'G', 'g':
			mult = 1 << 30
		case 'T', 't':
			mult = 1 << 40
		}
		if mult > 1 {
			s = s[:n-1]
		}
	}
	v, err := strconv.ParseInt(s, 10, 64)
	if err != nil || v <= 0 {
		return 0, fmt.Errorf("%q is not a positive whole number", s)
	}
	if v > math.MaxInt64/mult {
		return 0, fmt.Errorf("%q is too large", s)
	}
	return v * mult, nil
}

// sizeString writes a byte count with the largest binary suffix that
// divides it.
func sizeString(n int64) string {
	for _, u := range []struct {
		s string
		m int64
	}{{"T", 1 << 40}, {"G", 1 << 30}, {"M", 1 << 20}, {"K", 1 << 10}} {
		if n >= u.m && n%u.m == 0 {
			return strconv.FormatInt(n/u.m, 10) + u.s
		}
	}
	return strconv.FormatInt(n, 10)
}

// dataSpec is how the data were read, as recorded in model files.
type dataSpec struct {
	Path     string `json:"path"`
	Labels   string `json:"labels,omitempty"`
	Label    string `json:"label,omitempty"`
	Columns  string `json:"columns,omitempty"`
	NoHeader bool   `json:"no_header,omitempty"`
	Skip     int    `json:"skip,omitempty"`
	Grey     bool   `json:"grey,omitempty"`
	Limits   string `json:"limits,omitempty"`
	Delim    string `json:"delimiter,omitempty"`
	Types    string `json:"types,omitempty"`
	Missing  string `json:"missing,omitempty"`
}

func (d *dataFlags) spec() dataSpec {
	return dataSpec{Path: d.path, Labels: d.labels, Label: d.label, Columns: d.columns, NoHeader: d.noHeader, Skip: d.skip, Grey: d.grey, Limits: d.limits.String(), Delim: d.delim, Types: d.types, Missing: d.missing}
}

// flags turns a recorded spec back into flags; limits that no longer
// parse (a file edited by hand) are an error naming them.
func (s dataSpec) flags() (dataFlags, error) {
	d := dataFlags{path: s.Path, labels: s.Labels, label: s.Label, columns: s.Columns, noHeader: s.NoHeader, skip: s.Skip, grey: s.Grey, delim: s.Delim, types: s.Types, missing: s.Missing, typed: true}
	if s.Limits != "" {
		if err := d.limits.Set(s.Limits); err != nil {
			return d, fmt.Errorf("the recorded -limit %q: %v", s.Limits, err)
		}
	}
	return d, nil
}

// separator reads -delimiter: one character, or "tab"; 0 (find it) when
// empty.
func (d *dataFlags) separator() (rune, error) {
	switch d.delim {
	case "":
		return 0, nil
	case "tab", `\t`:
		return '\t', nil
	}
	r := []rune(d.delim)
	if len(r) != 1 || r[0] == '"' || r[0] == '\n' || r[0] == '\r' {
		return 0, usagef("-delimiter %q: want one character (such as ; or |) or tab", d.delim)
	}
	return r[0], nil
}

func splitList(s string) []string {
	if strings.TrimSpace(s) == "" {
		return nil
	}
	parts := strings.Split(s, ",")
	for i := range parts {
		parts[i] = strings.TrimSpace(parts[i])
	}
	return parts
}

// load reads the data the flags name, shown as the "load" phase of st
// (which may be nil).
func (d *dataFlags) load(st *status) (*data.Dataset, data.Format, error) {
	if d.path == "" {
		return nil, "", usagef("-data is required")
	}
	comma, err := d.separator()
	if err != nil {
		return nil, "", err
	}
	csvCfg := data.CSVConfig{NoHeader: d.noHeader, SkipLines: d.skip, Columns: splitList(d.columns), Label: d.label, Keep: splitList(d.keep), Exclude: splitList(d.exclude), Comma: comma, Limits: d.limits.l,
		Typed: d.typed, Encoding: d.enc}
	if d.typed {
		if csvCfg.Types, err = data.ParseTypes(d.types); err != nil {
			return nil, "", usagef("-types %s", strings.TrimPrefix(err.Error(), "data: invalid configuration: "))
		}
		switch strings.TrimSpace(d.missing) {
		case "":
		case "none":
			csvCfg.Missing = []string{}
		default:
			csvCfg.Missing = splitList(d.missing)
		}
	}
	if d.path == "-" {
		// standard input: CSV, plain or gzip
		if st != nil {
			st.begin(d.loadPhase(), func() string { return "standard input" })
			defer st.end()
		}
		ds, err := data.ReadCSVStream(os.Stdin, "standard input", csvCfg)
		var le *data.LimitError
		if errors.As(err, &le) {
			return nil, "", fmt.Errorf("%w (raise it with -limit %s=N)", err, le.Key)
		}
		return ds, data.FormatCSV, err
	}
	if _, err := os.Stat(d.path); err != nil {
		return nil, "", fmt.Errorf("cannot read data: %w", err)
	}
	cfg := data.LoadConfig{
		CSV:    csvCfg,
		IDX:    data.IDXConfig{Labels: d.labels},
		Images: data.ImageConfig{Grey: d.grey},
		Limits: d.limits.l,
	}
	if st != nil {
		var mu sync.Mutex
		var done, total int64
		cfg.Progress = func(dn, tt int64) {
			mu.Lock()
			done, total = dn, tt
			mu.Unlock()
		}
		st.begin(d.loadPhase(), loadDetail(d.path, &done, &total, &mu))
		defer st.end()
	}
	ds, f, err := data.Load(d.path, cfg)
	var le *data.LimitError
	if errors.As(err, &le) {
		return nil, "", fmt.Errorf("%w (raise it with -limit %s=N)", err, le.Key)
	}
	if err == nil && d.keep != "" && f != data.FormatCSV {
		return nil, "", usagef("-keep applies to CSV files; %s is %s", d.path, f)
	}
	return ds, f, err
}

// loadFor loads data for a trained model whose columns are known: a CSV
// file with a header is read by those column names (in any order) when no
// -columns are given, so extra columns (an id, a timestamp) are ignored.
// A column the header lacks is an error naming it: never a silent read by
// position of columns that may mean something else.
func (d *dataFlags) loadFor(schema data.Schema, cols int, st *status) (*data.Dataset, error) {
	columns := schema.Columns
	if enc := schema.Encoding; enc != nil && !d.typed {
		if f, err := data.Detect(d.path); d.path == "-" || (err == nil && f == data.FormatCSV) {
			// the model's encoding names its columns and reads each cell
			d.enc = enc
			ds, _, err := d.load(st)
			d.enc = nil
			var pe *data.ParseError
			if errors.As(err, &pe) && strings.HasPrefix(pe.Msg, "no column ") {
				return nil, fmt.Errorf("%s: the model's column %s is not in the header (the model reads %s by name, in any order); give -columns with the file's names for them in that order, or -no-header to read by position",
					d.path, strings.TrimPrefix(pe.Msg, "no column "), strings.Join(enc.Names(), ", "))
			}
			return ds, err
		}
	}
	if d.columns == "" && !d.noHeader && len(columns) == cols && columns[0] != "" && columns[0] != "c0" {
		if f, err := data.Detect(d.path); d.path == "-" || (err == nil && (f == data.FormatCSV || f == data.FormatParquet)) {
			saved := d.columns
			d.columns = strings.Join(columns, ",")
			ds, _, err := d.load(st)
			d.columns = saved
			var pe *data.ParseError
			if errors.As(err, &pe) && strings.HasPrefix(pe.Msg, "no column ") {
				return nil, fmt.Errorf("%s: the model's column %s is not in the header (the model reads %s by name, in any order); give -columns with the file's names for them in that order, or -no-header to read by position",
					d.path, strings.TrimPrefix(pe.Msg, "no column "), strings.Join(columns, ", "))
			}
			return ds, err
		}
	}
	ds, _, err := d.load(st)
	if err != nil {
		return nil, err
	}
	if ds.Cols != cols {
		return nil, fmt.Errorf("%s has %d feature columns, the model takes %d", d.path, ds.Cols, cols)
	}
	return ds, nil
}

func parseInts(s, name string) ([]int, error) {
	if strings.TrimSpace(s) == "" {
		return []int{}, nil
	}
	var out []int
	for _, p := range splitList(s) {
		v, err := strconv.Atoi(p)
		if err != nil || v <= 0 {
			return nil, usagef("-%s: %q is not a positive width", name, p)
		}
		out = append(out, v)
	}
	return out, nil
}
