package data

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
)

// FieldType says how a table column's cells become a model's inputs.
type FieldType string

// The field types. Numbers and integers are one input each; a boolean is
// one input, 1 for its true text; a categorical column is one input per
// level seen in training, 1 for the row's level and 0 for the others
// (one-hot).
const (
	Numeric     FieldType = "numeric"
	Integer     FieldType = "integer"
	Boolean     FieldType = "boolean"
	Categorical FieldType = "categorical"
)

// FieldTypes lists the field types.
var FieldTypes = []FieldType{Numeric, Integer, Boolean, Categorical}

// DefaultMissing are the texts that mark a missing cell when
// CSVConfig.Missing is nil, besides the empty cell (which always does).
var DefaultMissing = []string{"NA", "N/A", "NaN", "nan", "?", "null", "NULL"}

// strayShare: a column of numbers whose texts are at most one cell in
// strayShare is read as numbers, its texts as missing cells (common
// practice, no source: a stray "null" or "-" in a column of amounts).
const strayShare = 20

// plural is n and the noun, with an s unless n is 1.
func plural(n int, noun string) string {
	if n == 1 {
		return "1 " + noun
	}
	return fmt.Sprintf("%d %ss", n, noun)
}

// DefaultMaxLevels caps a categorical column's distinct values when
// CSVConfig.MaxLevels is 0: more are likely an identifier, not a category.
const DefaultMaxLevels = 1000

// Field is one column of a table as a model reads it.
type Field struct {
	Name string    `json:"name"`
	Type FieldType `json:"type"`
	// Levels are a categorical column's values in the training rows,
	// sorted; each is one input.
	Levels []string `json:"levels,omitempty"`
	// True and False are a boolean column's two texts (matched without
	// regard to case).
	True  string `json:"true,omitempty"`
	False string `json:"false,omitempty"`
	// Fill is the input a missing number, integer or boolean takes: the
	// median of the training rows' observed cells. A missing categorical
	// cell has no level: all its inputs are 0.
	Fill float32 `json:"fill"`
	// Indicator adds an input after the field's, 1 where the cell is
	// missing and 0 elsewhere; set when training rows had missing cells
	// in the column.
	Indicator bool `json:"indicator,omitempty"`
	// Missing counts the training rows whose cell was missing.
	Missing int `json:"missing,omitempty"`
	// Min and Max are the observed range of a number or integer in the
	// training rows.
	Min float64 `json:"min,omitempty"`
	Max float64 `json:"max,omitempty"`
}

// Width is the number of inputs the field makes.
func (f *Field) Width() int {
	w := 1
	if f.Type == Categorical {
		w = len(f.Levels)
	}
	if f.Indicator {
		w++
	}
	return w
}

// Encoding says how a table's columns become a model's inputs: which
// columns, by name, of which types, with which levels, and how missing
// cells are filled. A model keeps the encoding of its training rows and
// reads every later file by it, by column name.
type Encoding struct {
	Fields []Field `json:"fields"`
	// Markers are the texts, besides the empty cell, that mark a missing
	// cell.
	Markers []string `json:"missing_markers,omitempty"`
}

// Width is the number of inputs the encoding makes.
func (e *Encoding) Width() int {
	n := 0
	for i := range e.Fields {
		n += e.Fields[i].Width()
	}
	return n
}

// Names are the fields' names (the table's columns), in order.
func (e *Encoding) Names() []string {
	out := make([]string, len(e.Fields))
	for i, f := range e.Fields {
		out[i] = f.Name
	}
	return out
}

// Columns names the inputs: a field's own name for a number, an integer
// or a boolean, "name=level" for each level of a categorical field, and
// "name (missing)" for an indicator.
func (e *Encoding) Columns() []string {
	var out []string
	for _, f := range e.Fields {
		if f.Type == Categorical {
			for _, l := range f.Levels {
				out = append(out, f.Name+"="+l)
			}
		} else {
			out = append(out, f.Name)
		}
		if f.Indicator {
			out = append(out, f.Name+" (missing)")
		}
	}
	return out
}

// Owners gives, for each input, the index of the field it comes from.
func (e *Encoding) Owners() []int {
	out := make([]int, 0, e.Width())
	for i := range e.Fields {
		for range e.Fields[i].Width() {
			out = append(out, i)
		}
	}
	return out
}

// Indicators marks, for each input, whether it is a missing-cell
// indicator.
func (e *Encoding) Indicators() []bool {
	out := make([]bool, 0, e.Width())
	for _, f := range e.Fields {
		for range f.Width() {
			out = append(out, false)
		}
		if f.Indicator {
			out[len(out)-1] = true
		}
	}
	return out
}

// Plain reports whether every field is a number or an integer without
// an indicator: the inputs are then the columns themselves.
func (e *Encoding) Plain() bool {
	for _, f := range e.Fields {
		if (f.Type != Numeric && f.Type != Integer) || f.Indicator {
			return false
		}
	}
	return true
}

// Check reports an encoding that cannot be applied: no fields, a name
// empty or repeated, an unknown type, a categorical field without levels
// or with a level repeated, a boolean without two distinct texts, a fill
// that is not finite.
func (e *Encoding) Check() error {
	if len(e.Fields) == 0 {
		return fmt.Errorf("%w: an encoding without fields", ErrConfig)
	}
	seen := map[string]bool{}
	for _, f := range e.Fields {
		if f.Name == "" || seen[f.Name] {
			return fmt.Errorf("%w: encoding: field name %q empty or repeated", ErrConfig, f.Name)
		}
		seen[f.Name] = true
		if !slices.Contains(FieldTypes, f.Type) {
			return fmt.Errorf("%w: encoding: field %q has type %q", ErrConfig, f.Name, f.Type)
		}
		if f.Type == Categorical {
			if len(f.Levels) == 0 {
				return fmt.Errorf("%w: encoding: categorical field %q has no levels", ErrConfig, f.Name)
			}
			lv := map[string]bool{}
			for _, l := range f.Levels {
				if lv[l] {
					return fmt.Errorf("%w: encoding: field %q repeats the level %q", ErrConfig, f.Name, l)
				}
				lv[l] = true
			}
		}
		if f.Type == Boolean && (f.True == "" || f.False == "" || strings.EqualFold(f.True, f.False)) {
			return fmt.Errorf("%w: encoding: boolean field %q needs two texts, has %q and %q", ErrConfig, f.Name, f.True, f.False)
		}
		if math.IsNaN(float64(f.Fill)) || math.IsInf(float64(f.Fill), 0) {
			return fmt.Errorf("%w: encoding: field %q fills with %v", ErrConfig, f.Name, f.Fill)
		}
	}
	return nil
}

// ParseTypes reads type overrides written "name=type,name=type" (types:
// numeric, integer, boolean, categorical).
func ParseTypes(s string) (map[string]FieldType, error) {
	out := map[string]FieldType{}
	for _, kv := range strings.Split(s, ",") {
		kv = strings.TrimSpace(kv)
		if kv == "" {
			continue
		}
		name, typ, ok := strings.Cut(kv, "=")
		t := FieldType(strings.TrimSpace(typ))
		if !ok || strings.TrimSpace(name) == "" || !slices.Contains(FieldTypes, t) {
			return nil, fmt.Errorf("%w: %q: want COLUMN=TYPE with TYPE numeric, integer, boolean or categorical", ErrConfig, kv)
		}
		out[strings.TrimSpace(name)] = t
	}
	return out, nil
}

// booleanPairs are the texts read as a boolean column's true and false
// when a column holds no others (compared without regard to case).
var booleanPairs = [][2]string{{"true", "false"}, {"yes", "no"}, {"t", "f"}, {"y", "n"}}

// RowNote is what reading one row of a table found worth saying: a
// missing cell filled in, a level not seen in training, a text where a
// number belongs; Unscorable when the row cannot be scored at all (no
// observed cell, a number outside the float32 range).
type RowNote struct {
	Row        int // 0-based, among the rows read
	Line       int // the file's line
	Text       string
	Unscorable bool
}

// cellReader encodes rows of text cells by an Encoding.
type cellReader struct {
	e       *Encoding
	levels  []map[string]int
	markers map[string]bool
	// training: a missing number is written as NaN, for the fill (the
	// median) to be set once every row is read
	training bool
}

func newCellReader(e *Encoding, training bool) *cellReader {
	r := &cellReader{e: e, markers: map[string]bool{}, training: training}
	for _, m := range e.Markers {
		r.markers[m] = true
	}
	r.levels = make([]map[string]int, len(e.Fields))
	for i, f := range e.Fields {
		if f.Type == Categorical {
			r.levels[i] = make(map[string]int, len(f.Levels))
			for j, l := range f.Levels {
				r.levels[i][l] = j
			}
		}
	}
	return r
}

func (r *cellReader) missing(s string) bool { return s == "" || r.markers[s] }

// row appends the inputs of one row's cells (cells[i] is field i's,
// trimmed) to dst and returns it with a note ("" when nothing was
// worth saying) and whether the row is unscorable.
func (r *cellReader) row(dst []float32, cells []string) ([]float32, string, bool) {
	var notes []string
	observed, unscorable := 0, false
	for i := range r.e.Fields {
		f := &r.e.Fields[i]
		s := cells[i]
		miss := r.missing(s)
		switch f.Type {
		case Numeric, Integer, Boolean:
			var v float32
			if !miss {
				var ok bool
				v, ok = r.number(f, s)
				if !ok {
					if f.Type == Boolean {
						notes = append(notes, fmt.Sprintf("%s: %q is neither %q nor %q, read as missing", f.Name, s, f.True, f.False))
					} else if _, kind := classify(s); kind == cellRange {
						notes = append(notes, fmt.Sprintf("%s: %q is outside the float32 range", f.Name, s))
						unscorable = true
					} else {
						notes = append(notes, fmt.Sprintf("%s: %q is not a number, read as missing", f.Name, s))
					}
					miss = true
				}
			}
			switch {
			case !miss:
				observed++
			case r.training:
				v = float32(math.NaN())
			default:
				v = f.Fill
				if !slices.ContainsFunc(notes, func(n string) bool { return strings.HasPrefix(n, f.Name+":") }) {
					notes = append(notes, fmt.Sprintf("%s: missing, filled with %s", f.Name, strconv.FormatFloat(float64(f.Fill), 'g', 6, 32)))
				}
			}
			dst = append(dst, v)
		case Categorical:
			at := len(dst)
			for range f.Levels {
				dst = append(dst, 0)
			}
			if !miss {
				if j, ok := r.levels[i][s]; ok {
					dst[at+j] = 1
					observed++
				} else {
					note := fmt.Sprintf("%s: level %q not seen in training", f.Name, s)
					for _, l := range f.Levels {
						if strings.EqualFold(l, s) {
							note += fmt.Sprintf(" (%q was: levels are told apart by case)", l)
							break
						}
					}
					notes = append(notes, note)
				}
			} else if !r.training {
				notes = append(notes, f.Name+": missing")
			}
		}
		if f.Indicator {
			var ind float32
			if miss {
				ind = 1
			}
			dst = append(dst, ind)
		}
	}
	if observed == 0 {
		// the cells merely missing go without saying
		notes = slices.DeleteFunc(notes, func(n string) bool {
			return strings.HasSuffix(n, ": missing") || strings.Contains(n, ": missing, filled with ")
		})
		notes = append([]string{"no observed cell"}, notes...)
		unscorable = true
	}
	return dst, strings.Join(notes, "; "), unscorable
}

// NoteColumns reads a row's note (RowNote.Text, or what a RowEncoder
// says) back into the columns it names: those read as missing (an empty
// cell or a marker, a text where a number belongs, a boolean's unknown
// text) and, apart, those whose text was not a number, with the first
// such text. The note's parts are "NAME: ..." joined by "; ".
func NoteColumns(note string) (missing, notNumber []string, text []string) {
	if note == "" {
		return nil, nil, nil
	}
	for _, part := range strings.Split(note, "; ") {
		name, rest, ok := strings.Cut(part, ": ")
		if !ok {
			continue
		}
		switch {
		case rest == "missing" || strings.HasPrefix(rest, "missing, filled with "):
			missing = append(missing, name)
		case strings.HasSuffix(rest, " is not a number, read as missing"):
			missing = append(missing, name)
			notNumber = append(notNumber, name)
			text = append(text, strings.TrimSuffix(rest, " is not a number, read as missing"))
		case strings.HasSuffix(rest, ", read as missing"):
			missing = append(missing, name)
		}
	}
	return missing, notNumber, text
}

// NoteUnseen names the first column a row's note says holds a level not
// seen in training, "" when none.
func NoteUnseen(note string) string {
	for _, part := range strings.Split(note, "; ") {
		name, rest, ok := strings.Cut(part, ": ")
		if ok && strings.HasPrefix(rest, "level ") && strings.Contains(rest, " not seen in training") {
			return name
		}
	}
	return ""
}

// number reads a number, integer or boolean cell; false when it is none.
func (r *cellReader) number(f *Field, s string) (float32, bool) {
	if f.Type == Boolean {
		// the column's own texts, or true and false (a JSON boolean)
		switch {
		case strings.EqualFold(s, f.True), strings.EqualFold(s, "true"):
			return 1, true
		case strings.EqualFold(s, f.False), strings.EqualFold(s, "false"):
			return 0, true
		}
		return 0, false
	}
	v, kind := classify(s)
	return float32(v), kind == cellNumber
}

// columnSurvey is what a first pass over a table learns of one column.
type columnSurvey struct {
	missing, numbers, cells int
	ranged                  int // numbers outside the float32 range
	integral                bool
	min, max                float64
	texts                   map[string]int // distinct non-missing texts, up to the cap
	tooMany                 bool
	firstText               string // the first non-number, with its line
	firstTextLine           int
	badNumber               string // a number outside the float32 range
	badLine                 int
}

func newColumnSurvey() *columnSurvey {
	return &columnSurvey{integral: true, texts: map[string]int{}}
}

func (c *columnSurvey) add(s string, line int, missing func(string) bool, maxLevels int) {
	c.cells++
	if missing(s) {
		c.missing++
		return
	}
	if !c.tooMany {
		if _, ok := c.texts[s]; !ok && len(c.texts) >= maxLevels {
			c.tooMany = true
		} else {
			c.texts[strings.Clone(s)]++ // s may view a batch's text
		}
	}
	switch v, kind := classify(s); kind {
	case cellNumber:
		if c.numbers == 0 || v < c.min {
			c.min = v
		}
		if c.numbers == 0 || v > c.max {
			c.max = v
		}
		c.numbers++
		if v != math.Trunc(v) {
			c.integral = false
		}
	case cellText:
		if c.firstText == "" {
			c.firstText, c.firstTextLine = strings.Clone(s), line
		}
	case cellRange:
		c.ranged++
		if c.badNumber == "" {
			c.badNumber, c.badLine = strings.Clone(s), line
		}
	}
}

// The kinds of a cell that is not missing.
const (
	cellNumber = iota // a finite float32
	cellRange         // a number, but infinite or outside the float32 range
	cellText          // not a number (NaN is text unless a marker)
)

// classify reads a cell that is not missing.
func classify(s string) (float64, int) {
	v, err := parseFloat32(s)
	switch {
	case err == nil && !math.IsNaN(v) && !math.IsInf(v, 0):
		return v, cellNumber
	case errors.Is(err, strconv.ErrRange) || (err == nil && math.IsInf(v, 0)):
		return 0, cellRange
	}
	return 0, cellText
}

// decide chooses the field for a surveyed column (want: a type the user
// gave, "" to infer). It fails, naming the column, when the column
// cannot be read as wanted.
func (c *columnSurvey) decide(name, file string, col int, want FieldType, maxLevels int) (Field, string, error) {
	f := Field{Name: name, Missing: c.missing, Indicator: c.missing > 0}
	observed := c.cells - c.missing
	if observed == 0 {
		return f, "", &ParseError{File: file, Column: col, Name: name, Msg: "every cell is missing: nothing to learn from (leave the column out with -columns)"}
	}
	texts := observed - c.numbers - c.ranged
	var note string
	if want == "" {
		switch {
		case texts == 0 && c.integral:
			want = Integer
		case texts == 0:
			want = Numeric
		case c.numbers == 0 && c.ranged == 0 && booleanPair(c.texts) != nil:
			want = Boolean
		case c.numbers > 0 && texts*strayShare <= observed && c.ranged == 0:
			// numbers with a stray text or two (null, -, n/a): the
			// texts are missing cells, and said so
			want = Numeric
			if c.integral {
				want = Integer
			}
			f.Missing += texts
			f.Indicator = true
			note = fmt.Sprintf("column %q: %s of %d (such as %q, line %d) %s not a number: read as missing (-types %s=categorical reads the column as categories instead)",
				name, plural(texts, "cell"), observed, c.firstText, c.firstTextLine, map[bool]string{true: "is", false: "are"}[texts == 1], name)
			texts = 0
		default:
			want = Categorical
		}
	}
	switch want {
	case Numeric, Integer:
		if texts > 0 {
			return f, "", &ParseError{File: file, Line: c.firstTextLine, Column: col, Name: name, Msg: fmt.Sprintf("%q is not a number (the column was given as %s)", c.firstText, want)}
		}
		if c.badNumber != "" {
			return f, "", &ParseError{File: file, Line: c.badLine, Column: col, Name: name, Msg: fmt.Sprintf("%q is outside the float32 range", c.badNumber)}
		}
		if want == Integer && !c.integral {
			return f, "", &ParseError{File: file, Column: col, Name: name, Msg: "the column was given as integer but holds fractions"}
		}
		f.Type, f.Min, f.Max = want, c.min, c.max
	case Boolean:
		p := booleanPair(c.texts)
		if p == nil {
			return f, "", &ParseError{File: file, Column: col, Name: name, Msg: fmt.Sprintf("the column was given as boolean but holds %s (want two texts such as true/false, yes/no)", sampleTexts(c.texts))}
		}
		f.Type, f.True, f.False = Boolean, p[0], p[1]
	case Categorical:
		if c.tooMany {
			return f, "", &ParseError{File: file, Column: col, Name: name, Msg: fmt.Sprintf("more than %d distinct values: an identifier rather than a category? leave it out (-columns) or pass it through (-keep)", maxLevels)}
		}
		f.Type = Categorical
		for l := range c.texts {
			f.Levels = append(f.Levels, l)
		}
		slices.Sort(f.Levels)
	}
	return f, note, nil
}

// booleanPair returns the true and false texts of a column whose texts
// are one known pair (or one half of it), as the column writes them; nil
// otherwise.
func booleanPair(texts map[string]int) []string {
	if len(texts) == 0 || len(texts) > 2 {
		return nil
	}
	for _, p := range booleanPairs {
		var tr, fa string
		ok := true
		for s := range texts {
			switch {
			case strings.EqualFold(s, p[0]):
				tr = s
			case strings.EqualFold(s, p[1]):
				fa = s
			default:
				ok = false
			}
		}
		if ok {
			return []string{cmpOr(tr, p[0]), cmpOr(fa, p[1])}
		}
	}
	return nil
}

func cmpOr(a, b string) string {
	if a != "" {
		return a
	}
	return b
}

// sampleTexts names up to three of a column's texts, sorted.
func sampleTexts(texts map[string]int) string {
	var s []string
	for t := range texts {
		s = append(s, strconv.Quote(t))
	}
	slices.Sort(s)
	if len(s) > 3 {
		s = append(s[:3], "...")
	}
	return strings.Join(s, ", ")
}

// fillMissing sets each number, integer and boolean field's Fill to the
// median of its observed inputs in d (of an even sample of fillSample
// rows when there are more; rounded for integers) and writes it where
// training left NaN.
func (e *Encoding) fillMissing(d *Dataset) {
	at := 0
	step := max(1, d.Rows/fillSample)
	vals := make([]float64, 0, min(d.Rows, fillSample+1))
	for i := range e.Fields {
		f := &e.Fields[i]
		if f.Type != Categorical {
			vals = vals[:0]
			for r := 0; r < d.Rows; r += step {
				if v := d.X[r*d.Cols+at]; !math.IsNaN(float64(v)) {
					vals = append(vals, float64(v))
				}
			}
			f.Fill = float32(median(vals))
			if f.Type != Numeric {
				f.Fill = float32(math.Round(float64(f.Fill)))
			}
			if f.Missing > 0 {
				for r := range d.Rows {
					if p := &d.X[r*d.Cols+at]; math.IsNaN(float64(*p)) {
						*p = f.Fill
					}
				}
			}
		}
		at += f.Width()
	}
}

// median of v (reordered); 0 for none. The middle order statistics by
// selection (Hoare's quickselect, median-of-three pivots), linear time on
// average.
func median(v []float64) float64 {
	n := len(v)
	if n == 0 {
		return 0
	}
	hi := selectKth(v, n/2)
	if n%2 == 1 {
		return hi
	}
	// the largest of the lower half
	lo := v[0]
	for _, x := range v[1 : n/2] {
		lo = max(lo, x)
	}
	return (lo + hi) / 2
}

// selectKth reorders v so that v[k] is its k-th smallest value (0-based),
// every value before it no larger and every one after it no smaller, and
// returns v[k].
func selectKth(v []float64, k int) float64 {
	lo, hi := 0, len(v)-1
	for lo < hi {
		mid := lo + (hi-lo)/2
		// median of three as the pivot, moved to hi
		if v[mid] < v[lo] {
			v[mid], v[lo] = v[lo], v[mid]
		}
		if v[hi] < v[lo] {
			v[hi], v[lo] = v[lo], v[hi]
		}
		if v[mid] < v[hi] {
			v[mid], v[hi] = v[hi], v[mid]
		}
		p := v[hi]
		i := lo
		for j := lo; j < hi; j++ {
			if v[j] < p {
				v[i], v[j] = v[j], v[i]
				i++
			}
		}
		v[i], v[hi] = v[hi], v[i]
		switch {
		case k < i:
			hi = i - 1
		case k > i:
			lo = i + 1
		default:
			return v[k]
		}
	}
	return v[k]
}

// Describe says in a line what the field is: its type, its levels or
// texts, and its missing cells in training.
func (f *Field) Describe() string {
	var b strings.Builder
	b.WriteString(f.Name)
	b.WriteByte(' ')
	b.WriteString(string(f.Type))
	switch f.Type {
	case Categorical:
		fmt.Fprintf(&b, " (%d levels)", len(f.Levels))
	case Boolean:
		fmt.Fprintf(&b, " (%s/%s)", f.True, f.False)
	}
	if f.Missing > 0 {
		fmt.Fprintf(&b, ", %d missing", f.Missing)
		if f.Type != Categorical {
			fmt.Fprintf(&b, " filled with %s", strconv.FormatFloat(float64(f.Fill), 'g', 6, 32))
		}
	}
	return b.String()
}

// Describe says in a line what the encoding reads: each field's
// Describe, separated by semicolons.
func (e *Encoding) Describe() string {
	parts := make([]string, len(e.Fields))
	for i := range e.Fields {
		parts[i] = e.Fields[i].Describe()
	}
	return strings.Join(parts, "; ")
}

// RowEncoder encodes rows of cell texts by an Encoding, as a file read
// with CSVConfig.Encoding is: for a server taking records one at a time.
// It is safe for concurrent use.
type RowEncoder struct{ r *cellReader }

// NewRowEncoder checks e and returns its encoder.
func NewRowEncoder(e *Encoding) (*RowEncoder, error) {
	if err := e.Check(); err != nil {
		return nil, err
	}
	return &RowEncoder{newCellReader(e, false)}, nil
}

// Encode appends the inputs of one row to dst: cells[i] is field i's
// text ("" or a marker for a missing cell). It returns what reading the
// row found worth saying ("" when nothing) and whether the row is
// unscorable (see RowNote). A cell it cannot read is filled in and said,
// never an error.
func (re *RowEncoder) Encode(dst []float32, cells []string) ([]float32, string, bool) {
	if len(cells) != len(re.r.e.Fields) {
		panic(fmt.Sprintf("data: RowEncoder.Encode: %d cells for %d fields", len(cells), len(re.r.e.Fields)))
	}
	for i, c := range cells {
		cells[i] = strings.TrimSpace(c)
	}
	return re.r.row(dst, cells)
}

// Decode writes one row of inputs (a reconstruction, a sample) as the
// table's cells, appended to dst: a number kept within the column's
// training range (so a column never negative stays so) and an integer
// rounded, a boolean's text by the side of 0.5 its input is on, a
// category's level with the largest input, and an empty (missing) cell
// where the column's missing-cell indicator is at least 0.5.
func (e *Encoding) Decode(dst []string, in []float32) []string {
	at := 0
	for i := range e.Fields {
		f := &e.Fields[i]
		w := f.Width()
		v := in[at : at+w]
		at += w
		if f.Indicator && v[w-1] >= 0.5 {
			dst = append(dst, "")
			continue
		}
		switch f.Type {
		case Numeric, Integer:
			x := min(max(float64(v[0]), f.Min), f.Max)
			if f.Type == Integer {
				dst = append(dst, strconv.FormatFloat(math.Round(x), 'f', 0, 64))
			} else {
				dst = append(dst, strconv.FormatFloat(x, 'g', -1, 32))
			}
		case Boolean:
			if v[0] >= 0.5 {
				dst = append(dst, f.True)
			} else {
				dst = append(dst, f.False)
			}
		case Categorical:
			best := 0
			for l := range f.Levels {
				if v[l] > v[best] {
					best = l
				}
			}
			dst = append(dst, f.Levels[best])
		}
	}
	return dst
}

// MissingGroup is the inputs a missing-cell indicator stands for: inputs
// From..To-1 (a column's value, or a category's levels) say nothing of a
// row whose input Indicator is 1.
type MissingGroup struct{ From, To, Indicator int }

// MissingGroups lists the encoding's indicators and the inputs each
// stands for, in input order (nil: none).
func (e *Encoding) MissingGroups() []MissingGroup {
	var out []MissingGroup
	at := 0
	for _, f := range e.Fields {
		w := f.Width()
		if f.Indicator {
			out = append(out, MissingGroup{From: at, To: at + w - 1, Indicator: at + w - 1})
		}
		at += w
	}
	return out
}

// Unseen names the first categorical field with a missing-cell
// indicator whose level in the raw input row is one never seen in
// training (every level's input 0 while the indicator says the cell is
// not missing), "" when there is none. Without an indicator a missing
// cell and an unseen level look alike in the inputs: the reading's note
// tells them apart (NoteUnseen).
func (e *Encoding) Unseen(row []float32) string {
	at := 0
	for i := range e.Fields {
		f := &e.Fields[i]
		w := f.Width()
		if f.Type == Categorical && f.Indicator && at+w <= len(row) {
			in := row[at : at+w]
			if in[w-1] < 0.5 {
				seen := false
				for _, v := range in[:len(f.Levels)] {
					if v >= 0.5 {
						seen = true
						break
					}
				}
				if !seen {
					return f.Name
				}
			}
		}
		at += w
	}
	return ""
}

// CategorySpans lists the inputs [from, to) of each categorical field's
// levels, in input order (nil: none): where a model's reconstruction is a
// softmax over a column's levels.
func (e *Encoding) CategorySpans() [][2]int {
	var out [][2]int
	at := 0
	for _, f := range e.Fields {
		if f.Type == Categorical && len(f.Levels) >= 2 {
			out = append(out, [2]int{at, at + len(f.Levels)})
		}
		at += f.Width()
	}
	return out
}

// CheckSpans reports the first span of inputs [from, to) that is not
// inside width inputs, is narrower than two, or overlaps another.
func CheckSpans(spans [][2]int, width int) error {
	used := make([]bool, width)
	for i, s := range spans {
		if s[0] < 0 || s[1] > width || s[1]-s[0] < 2 {
			return fmt.Errorf("category %d: inputs [%d,%d) of %d are not a group of two or more", i+1, s[0], s[1], width)
		}
		for k := s[0]; k < s[1]; k++ {
			if used[k] {
				return fmt.Errorf("category %d: input %d is in another category too", i+1, k)
			}
			used[k] = true
		}
	}
	return nil
}

// SoftmaxSpans replaces each span of x (rows of cols values) by its
// softmax, in float64 within a span.
func SoftmaxSpans(x []float32, cols int, spans [][2]int) {
	for r := 0; r+cols <= len(x); r += cols {
		row := x[r : r+cols]
		for _, s := range spans {
			v := row[s[0]:s[1]]
			m := math.Inf(-1)
			for _, u := range v {
				m = math.Max(m, float64(u))
			}
			var z float64
			for _, u := range v {
				z += math.Exp(float64(u) - m)
			}
			for k, u := range v {
				v[k] = float32(math.Exp(float64(u)-m) / z)
			}
		}
	}
}
