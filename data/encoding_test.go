package data

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// A table of numbers, integers, booleans, categories and missing cells:
// the types, levels, fills (medians, worked by hand) and indicators
// inferred, the inputs one-hot, and later files read by the encoding by
// column name, with what could not be read noted, never an error.
func TestTypedTable(t *testing.T) {
	const train = "id,amount,items,card,channel,country\n" +
		"1,10.5,1,yes,web,FR\n" +
		"2,,2,no,shop,DE\n" +
		"3,3.25,NA,yes,web,\n" +
		"4,7,4,,phone,FR\n" +
		"5,1,3,no,web,FR\n" +
		",,?,,,\n"
	d, err := ReadCSV(strings.NewReader(train), "pay.csv", CSVConfig{Typed: true, Exclude: []string{"id"}})
	require.NoError(t, err)
	e := d.Encoding
	require.NotNil(t, e)
	require.Equal(t, []int{7}, d.Skipped, "the row without an observed cell is left out")
	require.Equal(t, 5, d.Rows)
	want := []Field{
		// observed 10.5, 3.25, 7, 1: median (3.25+7)/2
		{Name: "amount", Type: Numeric, Fill: 5.125, Indicator: true, Missing: 2, Min: 1, Max: 10.5},
		// observed 1, 2, 4, 3: median 2.5, rounded to 3 (half away from zero)
		{Name: "items", Type: Integer, Fill: 3, Indicator: true, Missing: 2, Min: 1, Max: 4},
		// yes, no, yes, no: median of 1, 0, 1, 0 is 0.5, rounded to 1
		{Name: "card", Type: Boolean, True: "yes", False: "no", Fill: 1, Indicator: true, Missing: 2},
		{Name: "channel", Type: Categorical, Levels: []string{"phone", "shop", "web"}, Indicator: true, Missing: 1},
		{Name: "country", Type: Categorical, Levels: []string{"DE", "FR"}, Indicator: true, Missing: 2},
	}
	require.Equal(t, want, e.Fields)
	require.Equal(t, []string{"amount", "amount (missing)", "items", "items (missing)", "card", "card (missing)",
		"channel=phone", "channel=shop", "channel=web", "channel (missing)", "country=DE", "country=FR", "country (missing)"}, d.Columns)
	require.Equal(t, 13, d.Cols)
	require.Equal(t, []float32{5.125, 1, 2, 0, 0, 0, 0, 1, 0, 0, 1, 0, 0}, d.Row(1), "row 2: amount filled, card no, shop, DE")
	require.Equal(t, []float32{3.25, 0, 3, 1, 1, 0, 0, 0, 1, 0, 0, 0, 1}, d.Row(2), "row 3: items filled, country missing")
	require.Equal(t, []int{0, 0, 1, 1, 2, 2, 3, 3, 3, 3, 4, 4, 4}, e.Owners())
	require.NoError(t, e.Check())

	// a later file: reordered, an extra column, an unseen level, a
	// number that is text, a boolean that is neither, a row with nothing
	const later = "country,channel,note,card,items,amount\n" +
		"FR,web,a,yes,2,4\n" +
		"US,fax,b,maybe,x,1e39\n" +
		",,c,,,\n"
	s, err := ReadCSV(strings.NewReader(later), "new.csv", CSVConfig{Encoding: e})
	require.NoError(t, err)
	require.Equal(t, 3, s.Rows)
	require.Equal(t, []float32{4, 0, 2, 0, 1, 0, 0, 0, 1, 0, 0, 1, 0}, s.Row(0))
	require.Len(t, s.Notes, 2)
	require.Equal(t, 1, s.Notes[0].Row)
	require.Equal(t, 3, s.Notes[0].Line)
	require.True(t, s.Notes[0].Unscorable, "1e39 is outside float32: the row cannot be scored")
	require.Contains(t, s.Notes[0].Text, `amount: "1e39" is outside the float32 range`)
	require.Contains(t, s.Notes[0].Text, `items: "x" is not a number, read as missing`)
	require.Contains(t, s.Notes[0].Text, `card: "maybe" is neither "yes" nor "no"`)
	require.Contains(t, s.Notes[0].Text, `channel: level "fax" not seen in training`)
	require.Contains(t, s.Notes[0].Text, `country: level "US" not seen in training`)
	require.Equal(t, RowNote{Row: 2, Line: 4, Text: "no observed cell", Unscorable: true}, s.Notes[1])
	require.Equal(t, float32(1), s.Row(1)[3], "the text in items is read as missing: its indicator is set")

	// a column the model reads is not in the file
	_, err = ReadCSV(strings.NewReader("amount,items,card,channel\n1,2,yes,web\n"), "short.csv", CSVConfig{Encoding: e})
	require.ErrorContains(t, err, `no column "country"`)
}

// A table of numbers reads in one pass and gets a plain encoding whose
// fills are the medians; its later files may have missing cells.
func TestPlainEncoding(t *testing.T) {
	d, err := ReadCSV(strings.NewReader("a,b\n1,0.5\n2,1.5\n4,2.5\n"), "n.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Equal(t, []Field{{Name: "a", Type: Integer, Fill: 2, Min: 1, Max: 4}, {Name: "b", Type: Numeric, Fill: 1.5, Min: 0.5, Max: 2.5}}, d.Encoding.Fields)
	require.True(t, d.Encoding.Plain())
	s, err := ReadCSV(strings.NewReader("b,a\nNA,7\n"), "m.csv", CSVConfig{Encoding: d.Encoding})
	require.NoError(t, err)
	require.Equal(t, []float32{7, 1.5}, s.X)
	require.Equal(t, "b: missing, filled with 1.5", s.Notes[0].Text)
	require.False(t, s.Notes[0].Unscorable)
}

// Type overrides, and the columns a typed reading refuses, each named.
func TestTypedTableRefusals(t *testing.T) {
	d, err := ReadCSV(strings.NewReader("zip,v\n75001,1\n10115,2\n75001,3\n"), "z.csv", CSVConfig{Typed: true, Types: map[string]FieldType{"zip": Categorical}})
	require.NoError(t, err)
	require.Equal(t, []string{"10115", "75001"}, d.Encoding.Fields[0].Levels)
	for _, c := range []struct {
		text  string
		cfg   CSVConfig
		error string
	}{
		{"a,b\nx,1\ny,2\n", CSVConfig{Types: map[string]FieldType{"a": Numeric}}, `z.csv:2: column 1 (a): "x" is not a number (the column was given as numeric)`},
		{"a,b\n1.5,1\n2,2\n", CSVConfig{Types: map[string]FieldType{"a": Integer}}, "given as integer but holds fractions"},
		{"a,b\nx,1\ny,2\n", CSVConfig{Types: map[string]FieldType{"a": Boolean}}, `given as boolean but holds "x", "y"`},
		{"a,b\nx,1\ny,2\n", CSVConfig{Types: map[string]FieldType{"c": Boolean}}, `a type is given for "c"`},
		{"a,b\nx,1\ny,2\nz,3\n", CSVConfig{MaxLevels: 2, Types: map[string]FieldType{"a": Categorical}}, "column 1 (a): more than 2 distinct values: an identifier"},
		{"a\n2026-01-02\n2026-01-03\n", CSVConfig{}, `no feature column left: column "a" left out: its cells are dates or times`},
		{"a,b\n,1\nNA,2\n", CSVConfig{}, "column 1 (a): every cell is missing"},
		{"a,b\nx,inf\n", CSVConfig{}, `column 2 (b): "inf" is outside the float32 range`},
	} {
		c.cfg.Typed = true
		_, err := ReadCSV(strings.NewReader(c.text), "z.csv", c.cfg)
		require.ErrorContains(t, err, c.error, c.text)
	}
	// markers are configurable: "-" is missing, NA is then a level
	d, err = ReadCSV(strings.NewReader("a,b\nNA,1\n-,2\nx,3\n"), "m.csv", CSVConfig{Typed: true, Missing: []string{"-"}})
	require.NoError(t, err)
	require.Equal(t, []string{"NA", "x"}, d.Encoding.Fields[0].Levels)
	require.Equal(t, 1, d.Encoding.Fields[0].Missing)
	require.False(t, math.IsNaN(float64(d.X[0])))
}

// Columns inferred to be identifiers (texts all different over 20 or
// more cells, or more distinct than MaxLevels) or times (RFC 3339 and ISO
// 8601 dates and times) are left out and said so; a type given reads
// them; a few all-different texts stay a category.
func TestIdentifiersAndTimesLeftOut(t *testing.T) {
	var b strings.Builder
	b.WriteString("id,when,day,shop,amount,few\n")
	for i := range 30 {
		few := fmt.Sprint("f", i%3)
		fmt.Fprintf(&b, "p%03d,2026-03-%02dT10:%02d:00Z,2026-03-%02d,%s,%d.5,%s\n", i, 1+i%28, i, 1+i%28, []string{"a", "b"}[i%2], i, few)
	}
	d, err := ReadCSV(strings.NewReader(b.String()), "p.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Equal(t, []string{"shop", "amount", "few"}, d.Encoding.Names())
	require.Len(t, d.LeftOut, 3)
	require.Contains(t, d.LeftOut[0], `column "id" left out: each of its 30 cells is different, an identifier`)
	require.Contains(t, d.LeftOut[1], `column "when" left out: its cells are dates or times`)
	require.Contains(t, d.LeftOut[2], `column "day" left out: its cells are dates or times`)
	d, err = ReadCSV(strings.NewReader(b.String()), "p.csv", CSVConfig{Typed: true, Types: map[string]FieldType{"id": Categorical}, MaxLevels: 20})
	require.Nil(t, d)
	require.ErrorContains(t, err, "column 1 (id): more than 20 distinct values")
	d, err = ReadCSV(strings.NewReader(b.String()), "p.csv", CSVConfig{Typed: true, MaxLevels: 20})
	require.NoError(t, err)
	require.Contains(t, d.LeftOut[0], `column "id" left out: more than 20 distinct values`)
	// times past the cap are still told from identifiers
	require.Contains(t, d.LeftOut[1], `column "when" left out: its cells are dates or times`)
	// mostly different texts are an identifier too
	var mostly strings.Builder
	mostly.WriteString("k,v\n")
	for i := range 40 {
		fmt.Fprintf(&mostly, "k%d,%d\n", i%25, i%7)
	}
	d, err = ReadCSV(strings.NewReader(mostly.String()), "k.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Equal(t, []string{`column "k" left out: 25 different values in 40 cells, an identifier rather than a category (quern score -keep k passes it through beside the scores; -types k=categorical reads it as a category)`}, d.LeftOut)
	// a column of numbers with one stray text is not an identifier: its
	// numbers read as numbers, the text as a missing cell, and said so
	var amounts strings.Builder
	amounts.WriteString("amount,v\n")
	for i := range 40 {
		fmt.Fprintf(&amounts, "%d.5,%d\n", i, i%3)
	}
	amounts.WriteString("-,1\n")
	d, err = ReadCSV(strings.NewReader(amounts.String()), "a.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Empty(t, d.LeftOut)
	require.Equal(t, []string{`column "amount": 1 cell of 41 (such as "-", line 42) is not a number: read as missing (-types amount=categorical reads the column as categories instead)`}, d.Stray)
	f := d.Encoding.Fields[0]
	require.Equal(t, Numeric, f.Type)
	require.True(t, f.Indicator)
	require.Equal(t, 1, f.Missing)
	require.Equal(t, []float32{20, 1, 1}, d.X[40*3:41*3], "the stray cell filled with the median, its indicator set")
	// numbers with a decimal comma, and dates written month or day first,
	// are left out and said so
	var euro strings.Builder
	euro.WriteString("price,day,v\n")
	for i := range 30 {
		fmt.Fprintf(&euro, "\"%d,%d\",%d/%d/2024,%d\n", i, i%10, 1+i%12, 1+i, i%3)
	}
	d, err = ReadCSV(strings.NewReader(euro.String()), "e.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Len(t, d.LeftOut, 2)
	require.Contains(t, d.LeftOut[0], `column "price" left out: its cells are numbers written with a decimal comma (such as "0,0"), which quern does not read`)
	require.Contains(t, d.LeftOut[1], `column "day" left out: its cells are dates or times`)
	// a column of whole numbers, each once from the least to the
	// greatest, is a row number
	var numbered strings.Builder
	numbered.WriteString("student,hand\n")
	for i := range 30 {
		fmt.Fprintf(&numbered, "%d,%s\n", 101+(i*7)%30, []string{"left", "right"}[i%2])
	}
	d, err = ReadCSV(strings.NewReader(numbered.String()), "n.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Equal(t, []string{`column "student" left out: its values are the whole numbers 101 to 130, each once: a row number or an identifier rather than a measurement (quern score -keep student passes it through beside the scores; -types student=categorical reads it as a category)`}, d.LeftOut)
	// a table of numbers too: its row-number column is left out, the
	// others kept in order
	var nums strings.Builder
	nums.WriteString("rowid,a,b\n")
	for i := range 30 {
		fmt.Fprintf(&nums, "%d,%d,%d.5\n", 1000+(i*11)%30, i%4, i)
	}
	d, err = ReadCSV(strings.NewReader(nums.String()), "r.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Equal(t, []string{"a", "b"}, d.Encoding.Names())
	require.Equal(t, []string{"a", "b"}, d.Columns)
	require.Equal(t, 2, d.Cols)
	require.Equal(t, []float32{1, 1.5}, d.X[2:4])
	require.Equal(t, []string{`column "rowid" left out: its values are the whole numbers 1000 to 1029, each once: a row number or an identifier rather than a measurement (quern score -keep rowid passes it through beside the scores)`}, d.LeftOut)
	// a column the user names is read as asked, the doubt said
	d, err = ReadCSV(strings.NewReader(nums.String()), "r.csv", CSVConfig{Typed: true, Columns: []string{"rowid", "a"}})
	require.NoError(t, err)
	require.Equal(t, []string{"rowid", "a"}, d.Encoding.Names())
	require.Empty(t, d.LeftOut)
	require.Equal(t, []string{`column "rowid": its values are the whole numbers 1000 to 1029, each once: a row number or an identifier rather than a measurement; read as a feature, as the column list asks`}, d.Stray)
	d, err = ReadCSV(strings.NewReader(b.String()), "p.csv", CSVConfig{Typed: true, Columns: []string{"when", "shop"}})
	require.NoError(t, err)
	require.Equal(t, []string{"when", "shop"}, d.Encoding.Names())
	require.Contains(t, d.Stray[0], `column "when": its cells are dates or times; read as a feature, as the column list asks`)
	// ten different texts are too few to call an identifier
	d, err = ReadCSV(strings.NewReader("k,v\na,1\nb,2\nc,3\nd,4\ne,5\nf,6\ng,7\nh,8\ni,9\nj,10\n"), "k.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	require.Empty(t, d.LeftOut)
	require.Len(t, d.Encoding.Fields[0].Levels, 10)
}

// Unseen names a category whose level inputs are all 0 while its
// indicator says the cell is not missing (by the definition: a level
// never seen in training); without an indicator the note says which.
func TestUnseen(t *testing.T) {
	e := &Encoding{Fields: []Field{
		{Name: "n", Type: Numeric},
		{Name: "c", Type: Categorical, Levels: []string{"a", "b"}, Indicator: true},
		{Name: "d", Type: Categorical, Levels: []string{"x", "y"}},
	}}
	require.Equal(t, "", e.Unseen([]float32{1, 0, 1, 0, 1, 0}))
	require.Equal(t, "", e.Unseen([]float32{1, 0, 0, 1, 0, 1}), "c missing")
	require.Equal(t, "c", e.Unseen([]float32{1, 0, 0, 0, 0, 1}))
	// without an indicator an empty level is missing or unseen: the
	// inputs cannot tell, the note can
	require.Equal(t, "", e.Unseen([]float32{1, 1, 0, 0, 0, 0}))
	require.Equal(t, "d", NoteUnseen(`n: missing, filled with 2; d: level "z" not seen in training`))
	require.Equal(t, "", NoteUnseen("d: missing"))
}

// A number column holding an integer's extreme (or a run of nines) far
// beyond its other values is named: a code for a missing value, not a
// measurement; an ordinary wide column is not.
func TestSentinels(t *testing.T) {
	var b strings.Builder
	b.WriteString("pulse,wide\n")
	for i := range 40 {
		pulse := fmt.Sprint(60 + i%30)
		if i%13 == 0 {
			pulse = "-2147483648"
		}
		fmt.Fprintf(&b, "%s,%d\n", pulse, i*i*1000)
	}
	d, err := ReadCSV(strings.NewReader(b.String()), "s.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	got := d.Sentinels()
	require.Len(t, got, 1)
	require.Contains(t, got[0], `column "pulse": 4 rows hold -2147483648, far outside its other values`)
	// given as a marker, the sentinel is a missing cell, in a table of
	// numbers too (the numbers' own pass would read it as a number)
	d, err = ReadCSV(strings.NewReader(b.String()), "s.csv", CSVConfig{Typed: true, Missing: []string{"-2147483648"}})
	require.NoError(t, err)
	require.Equal(t, 4, d.Encoding.Fields[0].Missing)
	require.True(t, d.Encoding.Fields[0].Indicator)
	require.Empty(t, d.Sentinels())
	later, err := ReadCSV(strings.NewReader("pulse,wide\n-2147483648,5\n"), "l.csv", CSVConfig{Encoding: d.Encoding})
	require.NoError(t, err)
	require.Contains(t, later.Notes[0].Text, "pulse: missing, filled with")
	// a number marker no training cell held still marks a later one
	clean, err := ReadCSV(strings.NewReader("a,b\n1,2\n3,4\n5,7\n"), "c.csv", CSVConfig{Typed: true, Missing: []string{"-9999"}})
	require.NoError(t, err)
	require.True(t, clean.Encoding.Plain())
	later, err = ReadCSV(strings.NewReader("a,b\n-9999,2\n"), "l.csv", CSVConfig{Encoding: clean.Encoding})
	require.NoError(t, err)
	require.Len(t, later.Notes, 1)
	require.Contains(t, later.Notes[0].Text, "a: missing, filled with")
}

// Decode turns inputs back into cells: ranges kept, integers rounded,
// booleans and levels chosen, indicators read as missing (worked by
// hand).
func TestDecode(t *testing.T) {
	e := &Encoding{Fields: []Field{
		{Name: "amount", Type: Numeric, Min: 0, Max: 100, Indicator: true},
		{Name: "items", Type: Integer, Min: 1, Max: 5},
		{Name: "card", Type: Boolean, True: "yes", False: "no"},
		{Name: "channel", Type: Categorical, Levels: []string{"phone", "shop", "web"}, Indicator: true},
	}}
	require.Equal(t, []string{"0", "3", "yes", "shop"}, e.Decode(nil, []float32{-4.5, 0.2, 2.6, 0.7, 0.1, 0.8, 0.3, 0.4}))
	require.Equal(t, []string{"", "5", "no", ""}, e.Decode(nil, []float32{50, 0.6, 9, 0.2, 0.1, 0.8, 0.3, 0.5}))
	require.Equal(t, []string{"12.5", "1", "no", "phone"}, e.Decode(nil, []float32{12.5, 0, -3, 0.49, 0.9, 0.1, 0.2, 0}))
}

// median by selection equals the median of the sorted values (by
// definition), for odd and even counts, ties and random orders.
func TestMedian(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	for n := 1; n < 60; n++ {
		for range 20 {
			v := make([]float64, n)
			for i := range v {
				v[i] = float64(r.IntN(7)) // many ties
				if n > 30 {
					v[i] = r.NormFloat64()
				}
			}
			s := slices.Clone(v)
			slices.Sort(s)
			want := s[n/2]
			if n%2 == 0 {
				want = (s[n/2-1] + s[n/2]) / 2
			}
			require.Equal(t, want, median(v), "%v", s)
		}
	}
}

// A file read by a plain encoding takes the numbers' pass when every cell
// is a number, and the encoding's when one is not; either way the same
// rows, by name, and without a header by position.
func TestPlainEncodingPaths(t *testing.T) {
	d, err := ReadCSV(strings.NewReader("a,b\n1,2\n3,4\n"), "t.csv", CSVConfig{Typed: true})
	require.NoError(t, err)
	e := d.Encoding
	for _, c := range []struct {
		text  string
		cfg   CSVConfig
		x     []float32
		notes int
	}{
		{"b,x,a\n5,0,6\n", CSVConfig{}, []float32{6, 5}, 0},
		{"b,x,a\n5,0,\n", CSVConfig{}, []float32{2, 5}, 1},
		{"6,5,9\n", CSVConfig{NoHeader: true}, []float32{6, 5}, 0},
		{"q,r\n6,5\n", CSVConfig{Columns: []string{"q", "r"}}, []float32{6, 5}, 0},
	} {
		c.cfg.Encoding = e
		s, err := ReadCSV(strings.NewReader(c.text), "s.csv", c.cfg)
		require.NoError(t, err, c.text)
		require.Equal(t, c.x, s.X, c.text)
		require.Len(t, s.Notes, c.notes, c.text)
		require.Equal(t, e, s.Encoding)
		require.Equal(t, []string{"a", "b"}, s.Columns)
	}
}
