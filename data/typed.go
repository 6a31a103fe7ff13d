package data

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"
)

// minIdentifierRows is the fewest observed cells, more than half of them
// distinct, for a column of texts to be taken for an identifier (common
// practice, no source: below it a category may well have a level a row,
// and above it a category of mostly one-off levels teaches nothing).
const minIdentifierRows = 20

// timeLayouts are the layouts a column of dates or times is recognised
// by: RFC 3339 and its common relatives, and ISO 8601 dates.
var timeLayouts = []string{time.RFC3339Nano, "2006-01-02T15:04:05", "2006-01-02 15:04:05", "2006-01-02 15:04", "2006-01-02T15:04", "2006-01-02", "2006/01/02", "2006/01/02 15:04:05",
	// month first and day first, with or without leading zeros
	"1/2/2006", "2/1/2006", "1/2/2006 15:04", "2/1/2006 15:04", "1/2/2006 15:04:05", "2/1/2006 15:04:05",
	"2.1.2006", "2.1.2006 15:04", "2.1.2006 15:04:05"}

// notAFeature says why a column whose type is inferred is not one of a
// model's features ("" when it is one): a column of whole numbers that
// holds each number from its least to its greatest once (a row number);
// and, for a column of texts only (a column of numbers with a stray text
// is decide's), texts that are all dates or times (times set), numbers
// written with a decimal comma (times set: no -types advice), more
// distinct texts than half the cells over minIdentifierRows or more cells
// (an identifier), more distinct texts than maxLevels.
func (c *columnSurvey) notAFeature(maxLevels int) (why string, times bool) {
	observed := c.cells - c.missing
	if c.numbers == observed && c.integral && observed >= minIdentifierRows && c.max-c.min+1 == float64(observed) &&
		(c.tooMany || len(c.texts) == observed) {
		// whole numbers, each once, from the least to the greatest
		return fmt.Sprintf("its values are the whole numbers %s to %s, each once: a row number or an identifier rather than a measurement",
			strconv.FormatFloat(c.min, 'f', -1, 64), strconv.FormatFloat(c.max, 'f', -1, 64)), false
	}
	if c.numbers > 0 || c.ranged > 0 || observed == 0 {
		// numbers, or numbers with a stray text: decide says which
		return "", false
	}
	if len(c.texts) > 0 {
		times := true
		for t := range c.texts {
			if !isTime(t) {
				times = false
				break
			}
		}
		if times {
			return "its cells are dates or times", true
		}
		comma := true
		var example string
		for t := range c.texts {
			if !decimalComma(t) {
				comma = false
				break
			}
			if example == "" || t < example {
				example = t
			}
		}
		if comma {
			return fmt.Sprintf("its cells are numbers written with a decimal comma (such as %q), which quern does not read: write them with a decimal point", example), true
		}
	}
	if c.tooMany {
		return fmt.Sprintf("more than %d distinct values, an identifier rather than a category", maxLevels), false
	}
	if observed >= minIdentifierRows && booleanPair(c.texts) == nil {
		switch {
		case len(c.texts) == observed:
			return fmt.Sprintf("each of its %d cells is different, an identifier rather than a category", observed), false
		case 2*len(c.texts) > observed:
			return fmt.Sprintf("%d different values in %d cells, an identifier rather than a category", len(c.texts), observed), false
		}
	}
	return "", false
}

// decimalComma reports whether s is a number written with a decimal
// comma (and, perhaps, points or spaces between thousands): 18,5 or
// 1.234,56.
func decimalComma(s string) bool {
	s = strings.TrimPrefix(strings.TrimPrefix(s, "-"), "+")
	whole, frac, ok := strings.Cut(s, ",")
	if !ok || whole == "" || frac == "" {
		return false
	}
	for _, r := range frac {
		if r < '0' || r > '9' {
			return false
		}
	}
	for _, r := range whole {
		if (r < '0' || r > '9') && r != '.' && r != ' ' {
			return false
		}
	}
	return true
}

func isTime(s string) bool {
	if len(s) < 8 || s[0] < '0' || s[0] > '9' {
		return false
	}
	for _, l := range timeLayouts {
		if _, err := time.Parse(l, s); err == nil {
			return true
		}
	}
	return false
}

// readTyped reads a table as cfg asks, calling read for each pass over
// the text: once for numbers only (cfg.Typed unset, or an Encoding
// given); with cfg.Typed, first as numbers, and when a feature cell is
// not one, again to survey the columns and a third time to encode the
// rows by the Encoding the survey gives.
func readTyped(read func(CSVConfig) (*Dataset, error), name string, cfg CSVConfig) (*Dataset, error) {
	if cfg.Encoding != nil {
		if err := cfg.Encoding.Check(); err != nil {
			return nil, err
		}
		if cfg.Encoding.Plain() && !cfg.NoHeader && !numberMarker(cfg.Encoding.Markers) {
			// a table of numbers: the numbers' own pass, and the
			// encoding's only when a cell is not a number
			num := cfg
			num.Encoding, num.Typed = nil, false
			if num.Columns == nil {
				num.Columns = cfg.Encoding.Names()
			}
			d, err := read(num)
			var pe *ParseError
			if err == nil {
				d.Encoding, d.Columns = cfg.Encoding, cfg.Encoding.Columns()
				return d, nil
			}
			if !errors.As(err, &pe) || !pe.text {
				return nil, err
			}
		}
		return read(cfg)
	}
	if !cfg.Typed {
		return read(cfg)
	}
	if cfg.MaxLevels < 0 {
		return nil, fmt.Errorf("%w: MaxLevels %d", ErrConfig, cfg.MaxLevels)
	}
	if len(cfg.Types) == 0 && !numberMarker(markersOf(&cfg)) {
		d, err := read(cfg)
		var pe *ParseError
		if err == nil {
			d.Encoding = plainEncoding(d, markersOf(&cfg))
			return leaveOutRowNumbers(d, cfg.Columns != nil), nil
		}
		if !errors.As(err, &pe) || !pe.text {
			return nil, err
		}
	}
	// the survey
	sv := cfg
	sv.pass = &typedPass{}
	sd, err := read(sv)
	if err != nil {
		return nil, err
	}
	for t := range cfg.Types {
		if !slices.Contains(sd.Columns, t) {
			return nil, &ParseError{File: name, Msg: fmt.Sprintf("a type is given for %q, which is not a feature column (columns: %s)", t, strings.Join(sd.Columns, ", "))}
		}
	}
	enc := &Encoding{Markers: markersOf(&cfg)}
	var leftOut, stray []string
	for k, c := range sv.pass.survey {
		col := sd.Columns[k]
		want := cfg.Types[col]
		why, times := c.notAFeature(cmpOrInt(cfg.MaxLevels, DefaultMaxLevels))
		if want == "" && why != "" && cfg.Columns != nil {
			// named by the user: read as asked, and said
			stray = append(stray, fmt.Sprintf("column %q: %s; read as a feature, as the column list asks", col, why))
			why = ""
		}
		if want == "" && why != "" {
			how := fmt.Sprintf("quern score -keep %s passes it through beside the scores", col)
			if !times {
				how += fmt.Sprintf("; -types %s=categorical reads it as a category", col)
			}
			leftOut = append(leftOut, fmt.Sprintf("column %q left out: %s (%s)", col, why, how))
			continue
		}
		f, note, err := c.decide(col, name, sv.pass.cols[k], want, cmpOrInt(cfg.MaxLevels, DefaultMaxLevels))
		if err != nil {
			return nil, err
		}
		if note != "" {
			stray = append(stray, note)
		}
		enc.Fields = append(enc.Fields, f)
	}
	if len(enc.Fields) == 0 {
		return nil, &ParseError{File: name, Msg: "no feature column left: " + strings.Join(leftOut, "; ")}
	}
	// the rows
	en := cfg
	en.Encoding, en.Columns = enc, nil
	en.pass = &typedPass{training: true}
	d, err := read(en)
	if err != nil {
		return nil, err
	}
	enc.fillMissing(d)
	// rows without an observed cell teach nothing: left out, counted
	if slices.ContainsFunc(d.Notes, func(n RowNote) bool { return n.Unscorable }) {
		keep := make([]int, 0, d.Rows)
		next := 0
		for r := range d.Rows {
			for next < len(d.Notes) && d.Notes[next].Row < r {
				next++
			}
			if next < len(d.Notes) && d.Notes[next].Row == r && d.Notes[next].Unscorable {
				d.Skipped = append(d.Skipped, d.Notes[next].Line)
				continue
			}
			keep = append(keep, r)
		}
		kept := d.Kept
		nd := d.Subset(keep)
		nd.Encoding, nd.Skipped = d.Encoding, d.Skipped
		if len(kept) > 0 {
			nk := len(d.KeptColumns)
			nd.KeptColumns = d.KeptColumns
			for _, r := range keep {
				nd.Kept = append(nd.Kept, kept[r*nk:(r+1)*nk]...)
			}
		}
		if nd.Rows == 0 {
			return nil, &ParseError{File: name, Msg: "no row has an observed cell"}
		}
		d = nd
	}
	d.Notes = nil // in training rows, filled cells are the norm
	d.LeftOut, d.Stray = leftOut, stray
	return d, nil
}

// numberMarker reports whether a missing-cell marker reads as a number
// (a sentinel such as -9999): the numbers' own pass would take it for
// one, so the reading goes by the survey, which sees markers first.
func numberMarker(markers []string) bool {
	for _, m := range markers {
		if _, kind := classify(m); kind == cellNumber {
			return true
		}
	}
	return false
}

// markersOf is cfg's missing-cell markers.
func markersOf(cfg *CSVConfig) []string {
	if cfg.Missing == nil {
		return slices.Clone(DefaultMissing)
	}
	return cfg.Missing
}

func cmpOrInt(a, b int) int {
	if a != 0 {
		return a
	}
	return b
}

// fillSample is the most rows a fill (a median) is taken over: an even
// sample of them when there are more.
const fillSample = 1 << 16

// plainEncoding is the encoding of a table whose feature cells are all
// numbers: each column a number, or an integer when every value is
// whole, with its range and its median as the fill for missing cells in
// later files.
func plainEncoding(d *Dataset, markers []string) *Encoding {
	// the ranges as the parse gathered them, else one pass in row order
	// (the table is row-major: a pass per column would walk all of
	// memory once per column)
	st := d.stats
	if st == nil || !st.seen {
		st = newColumnStats(d.Cols)
		for r := range d.Rows {
			for j, v := range d.Row(r) {
				st.add(j, v)
			}
		}
	}
	step := max(1, d.Rows/fillSample)
	return plainEncodingOf(d.Columns, st, func(j int, vals []float64) []float64 {
		for r := 0; r < d.Rows; r += step {
			vals = append(vals, float64(d.X[r*d.Cols+j]))
		}
		return vals
	}, markers)
}

// plainEncodingOf is plainEncoding of a table whose columns' ranges are
// st and whose fill sample (every max(1, rows/fillSample)-th row, from
// the first) of column j sample appends to vals.
func plainEncodingOf(columns []string, st *columnStats, sample func(j int, vals []float64) []float64, markers []string) *Encoding {
	e := &Encoding{Markers: markers, Fields: make([]Field, len(columns))}
	lo, hi, whole := st.lo, st.hi, st.whole
	var vals []float64
	for j := range columns {
		f := Field{Name: columns[j], Type: Numeric, Min: float64(lo[j]), Max: float64(hi[j])}
		if whole[j] {
			f.Type = Integer
		}
		vals = sample(j, vals[:0])
		f.Fill = float32(median(vals))
		if f.Type == Integer {
			f.Fill = float32(math.Round(float64(f.Fill)))
		}
		e.Fields[j] = f
	}
	return e
}

// merge adds another batch's counts (a later part of the file).
func (c *columnSurvey) merge(o *columnSurvey, maxLevels int) {
	if o.numbers > 0 {
		if c.numbers == 0 || o.min < c.min {
			c.min = o.min
		}
		if c.numbers == 0 || o.max > c.max {
			c.max = o.max
		}
	}
	c.missing += o.missing
	c.numbers += o.numbers
	c.ranged += o.ranged
	c.cells += o.cells
	c.integral = c.integral && o.integral
	// the texts up to the cap, the least in sort order of each batch when
	// there are more (what notAFeature reads them for): the same whatever
	// the maps' order
	keys := make([]string, 0, len(o.texts))
	for s := range o.texts {
		keys = append(keys, s)
	}
	slices.Sort(keys)
	for _, s := range keys {
		n := o.texts[s]
		if c.tooMany {
			break
		}
		if _, ok := c.texts[s]; !ok && len(c.texts) >= maxLevels {
			c.tooMany = true
			break
		}
		c.texts[s] += n
	}
	c.tooMany = c.tooMany || o.tooMany
	if c.firstText == "" {
		c.firstText, c.firstTextLine = o.firstText, o.firstTextLine
	}
	if c.badNumber == "" {
		c.badNumber, c.badLine = o.badNumber, o.badLine
	}
}

// columnStats are the range of each column of numbers and whether its
// values are all whole, gathered as they are parsed.
type columnStats struct {
	lo, hi []float32
	whole  []bool
	seen   bool
}

func newColumnStats(cols int) *columnStats {
	s := &columnStats{lo: make([]float32, cols), hi: make([]float32, cols), whole: make([]bool, cols)}
	for j := range s.whole {
		s.whole[j] = true
	}
	return s
}

// add counts value v of column j; the first row sets the range.
func (s *columnStats) add(j int, v float32) {
	if !s.seen {
		s.lo[j], s.hi[j] = v, v
		if j == len(s.lo)-1 {
			s.seen = true
		}
	} else if v < s.lo[j] {
		s.lo[j] = v
	} else if v > s.hi[j] {
		s.hi[j] = v
	}
	if s.whole[j] && v != float32(math.Trunc(float64(v))) {
		s.whole[j] = false
	}
}

// merge adds another part's counts.
func (s *columnStats) merge(o *columnStats) {
	if !o.seen {
		return
	}
	if !s.seen {
		copy(s.lo, o.lo)
		copy(s.hi, o.hi)
		s.seen = true
	}
	for j := range s.lo {
		s.lo[j], s.hi[j] = min(s.lo[j], o.lo[j]), max(s.hi[j], o.hi[j])
		s.whole[j] = s.whole[j] && o.whole[j]
	}
}

// leaveOutRowNumbers leaves out of a table of numbers each whole-number
// column that holds every number from its least to its greatest once (a
// row number: minIdentifierRows rows or more), as a typed reading of a
// table with texts does (notAFeature), and says so in LeftOut; columns
// the user named (named) are kept and the doubt said in Stray.
func leaveOutRowNumbers(d *Dataset, named bool) *Dataset {
	e := d.Encoding
	if d.Rows < minIdentifierRows || e == nil || len(e.Fields) != d.Cols || d.Cols < 2 {
		return d
	}
	var drop []int
	seen := make([]bool, d.Rows)
	for j := range e.Fields {
		f := &e.Fields[j]
		if f.Type != Integer || f.Max-f.Min+1 != float64(d.Rows) {
			continue
		}
		clear(seen)
		once := true
		for r := 0; r < d.Rows && once; r++ {
			k := int(float64(d.X[r*d.Cols+j]) - f.Min)
			if k < 0 || k >= d.Rows || seen[k] {
				once = false
				break
			}
			seen[k] = true
		}
		if once {
			drop = append(drop, j)
		}
	}
	if len(drop) == 0 || len(drop) == d.Cols {
		return d
	}
	if named {
		// the columns the user named are read as asked, and said
		for _, j := range drop {
			f := &e.Fields[j]
			d.Stray = append(d.Stray, fmt.Sprintf("column %q: its values are the whole numbers %s to %s, each once: a row number or an identifier rather than a measurement; read as a feature, as the column list asks",
				f.Name, strconv.FormatFloat(f.Min, 'f', -1, 64), strconv.FormatFloat(f.Max, 'f', -1, 64)))
		}
		return d
	}
	keep := make([]int, 0, d.Cols-len(drop))
	for j := range d.Cols {
		if !slices.Contains(drop, j) {
			keep = append(keep, j)
		}
	}
	x := make([]float32, d.Rows*len(keep))
	for r := range d.Rows {
		row := d.X[r*d.Cols : (r+1)*d.Cols]
		for i, j := range keep {
			x[r*len(keep)+i] = row[j]
		}
	}
	nd := *d
	nd.X, nd.Cols, nd.stats = x, len(keep), nil
	nd.Columns = make([]string, len(keep))
	fields := make([]Field, len(keep))
	for i, j := range keep {
		nd.Columns[i], fields[i] = d.Columns[j], e.Fields[j]
	}
	nd.Encoding = &Encoding{Fields: fields, Markers: e.Markers}
	for _, j := range drop {
		f := &e.Fields[j]
		nd.LeftOut = append(nd.LeftOut, fmt.Sprintf("column %q left out: its values are the whole numbers %s to %s, each once: a row number or an identifier rather than a measurement (quern score -keep %s passes it through beside the scores)",
			f.Name, strconv.FormatFloat(f.Min, 'f', -1, 64), strconv.FormatFloat(f.Max, 'f', -1, 64), f.Name))
	}
	return &nd
}

// sentinels are numbers that records often hold for "no value": the
// extremes of 16- and 32-bit integers and runs of nines.
var sentinels = []float64{-2147483648, 2147483647, -32768, 32767, 65535, 4294967295,
	-9999, 9999, -99999, 99999, -999999, 999999, 9999999, -999, 999}

// Sentinels names each number column holding a sentinel value (see
// sentinels) far outside its other values (beyond ten interquartile
// ranges of its quartiles): most likely a code for a missing value,
// which a model would read as a real, extreme number.
func (d *Dataset) Sentinels() []string {
	if d.Image != nil || d.Rows < 4 {
		return nil
	}
	type col struct {
		j    int
		name string
	}
	var cols []col
	if e := d.Encoding; e != nil && e.Width() == d.Cols {
		at := 0
		for _, f := range e.Fields {
			if f.Type == Numeric || f.Type == Integer {
				cols = append(cols, col{at, f.Name})
			}
			at += f.Width()
		}
	} else {
		for j := range d.Cols {
			name := fmt.Sprintf("column %d", j+1)
			if j < len(d.Columns) && d.Columns[j] != "" {
				name = d.Columns[j]
			}
			cols = append(cols, col{j, name})
		}
	}
	// each column's candidates: the sentinels outside the range its
	// sampled quartiles make ordinary; a value can only equal one of them
	// when it lies outside that range too, so one pass in row order
	// checks the few values that do
	type check struct {
		lo, hi float64 // values in [lo, hi] equal no candidate
		q1, q3 float64
		cand   []float64
		count  []int
	}
	checks := make([]check, len(cols))
	step := max(1, d.Rows/fillSample)
	vals := make([]float64, 0, min(d.Rows, fillSample+1))
	some := false
	for i, c := range cols {
		vals = vals[:0]
		for r := 0; r < d.Rows; r += step {
			vals = append(vals, float64(d.X[r*d.Cols+c.j]))
		}
		slices.Sort(vals)
		q1, q3 := vals[len(vals)/4], vals[(3*len(vals))/4]
		iqr := q3 - q1
		ck := check{lo: q1 - 10*iqr, hi: q3 + 10*iqr, q1: q1, q3: q3}
		if iqr == 0 {
			ck.lo, ck.hi = q1, q1
		}
		for _, s := range sentinels {
			if (iqr > 0 && s >= q1-10*iqr && s <= q3+10*iqr) || (iqr == 0 && s == q1) {
				continue
			}
			ck.cand = append(ck.cand, s)
		}
		ck.count = make([]int, len(ck.cand))
		some = some || len(ck.cand) > 0
		checks[i] = ck
	}
	if !some {
		return nil
	}
	for r := range d.Rows {
		row := d.X[r*d.Cols : (r+1)*d.Cols]
		for i, c := range cols {
			ck := &checks[i]
			v := float64(row[c.j])
			if v >= ck.lo && v <= ck.hi {
				continue
			}
			for k, s := range ck.cand {
				if v == s {
					ck.count[k]++
				}
			}
		}
	}
	var out []string
	for i, c := range cols {
		ck := &checks[i]
		for k, s := range ck.cand {
			if n := ck.count[k]; n > 0 {
				out = append(out, fmt.Sprintf("column %q: %s hold %s, far outside its other values (quartiles %s and %s): a code for a missing value? -missing with %s among its texts reads it as missing",
					c.name, pluralRows(n), strconv.FormatFloat(s, 'f', -1, 64), strconv.FormatFloat(ck.q1, 'g', 6, 64), strconv.FormatFloat(ck.q3, 'g', 6, 64), strconv.FormatFloat(s, 'f', -1, 64)))
			}
		}
	}
	return out
}

func pluralRows(n int) string {
	if n == 1 {
		return "1 row"
	}
	return fmt.Sprintf("%d rows", n)
}
