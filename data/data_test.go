package data

import (
	"bytes"
	"compress/gzip"
	"encoding/binary"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/stat"
)

const fm = "../testdata/fashion-mnist/"

// Figures for the committed Fashion-MNIST subset were read independently
// with Python's gzip and struct modules (testdata/fashion-mnist/README.md).
func TestFashionMNISTSubset(t *testing.T) {
	d, err := LoadIDX(fm+"train-images-idx3-ubyte-first2000.gz", IDXConfig{Labels: fm + "train-labels-idx1-ubyte-first2000.gz"})
	require.NoError(t, err)
	require.Equal(t, 2000, d.Rows)
	require.Equal(t, 784, d.Cols)
	require.Equal(t, []int{28, 28, 1}, d.Image)
	var first, all float64
	for i, v := range d.X {
		require.True(t, v >= 0 && v <= 1)
		if i < 784 {
			first += float64(v) * 255
		}
		all += float64(v) * 255
	}
	require.InDelta(t, 76247, first, 0.01)
	require.InDelta(t, 113529887, all, 5)
	require.InDelta(t, 154, d.X[784*5+400]*255, 1e-3)
	counts := make([]int, 10)
	for _, l := range d.Labels {
		counts[l]++
	}
	require.Equal(t, []int{194, 216, 202, 195, 186, 200, 194, 215, 198, 200}, counts)

	raw, err := LoadIDX(fm+"t10k-images-idx3-ubyte-first500.gz", IDXConfig{Raw: true})
	require.NoError(t, err)
	require.Equal(t, 500, raw.Rows)
	require.Equal(t, float32(255), raw.X[577]) // unscaled bytes (read with Python)
}

// The full sets, when installed (Debian's dataset-fashion-mnist puts them
// in /usr/share/datasets/fashion-mnist; scripts/fetch-data.sh in .data).
// The package documents 60000/10000 images with 6000/1000 per class.
func TestFashionMNISTFull(t *testing.T) {
	dir := ""
	for _, c := range []string{"/usr/share/datasets/fashion-mnist", "../.data/fashion-mnist"} {
		if _, err := os.Stat(filepath.Join(c, "t10k-images-idx3-ubyte.gz")); err == nil {
			dir = c
		}
	}
	if dir == "" || testing.Short() {
		t.Skip("full Fashion-MNIST not installed (scripts/fetch-data.sh)")
	}
	for _, c := range []struct {
		name      string
		rows, per int
	}{{"t10k", 10000, 1000}, {"train", 60000, 6000}} {
		d, err := LoadIDX(filepath.Join(dir, c.name+"-images-idx3-ubyte.gz"), IDXConfig{Labels: filepath.Join(dir, c.name+"-labels-idx1-ubyte.gz")})
		require.NoError(t, err)
		require.Equal(t, c.rows, d.Rows)
		counts := make([]int, 10)
		for _, l := range d.Labels {
			counts[l]++
		}
		for _, n := range counts {
			require.Equal(t, c.per, n)
		}
	}
}

// scikit-learn's CSV sets as Debian ships them; the figures (569 rows of 30
// features, 212 malignant and 357 benign; 1797 rows of 64 values in 0..16)
// are those the sets document, the class counts of digits were read with
// Python's csv module.
func TestSklearnCSV(t *testing.T) {
	bc, err := LoadCSV("../testdata/sklearn/breast_cancer.csv", CSVConfig{NoHeader: true, SkipLines: 1, Label: "c30"})
	require.NoError(t, err)
	require.Equal(t, 569, bc.Rows)
	require.Equal(t, 30, bc.Cols)
	n0 := 0
	for _, l := range bc.Labels {
		if l == 0 {
			n0++
		}
	}
	require.Equal(t, 212, n0)
	require.Equal(t, float32(17.99), bc.X[0])
	require.Equal(t, float32(0.07039), bc.X[len(bc.X)-1]) // last feature of the last row

	dg, err := LoadCSV("../testdata/sklearn/digits.csv.gz", CSVConfig{NoHeader: true, Label: "c64"})
	require.NoError(t, err)
	require.Equal(t, 1797, dg.Rows)
	require.Equal(t, 64, dg.Cols)
	counts := make([]int, 10)
	for _, l := range dg.Labels {
		counts[l]++
	}
	require.Equal(t, []int{178, 182, 177, 183, 181, 182, 181, 179, 174, 180}, counts)
	var s float32
	for _, v := range dg.Row(0) {
		require.True(t, v >= 0 && v <= 16)
		s += v
	}
	require.Equal(t, float32(294), s)
}

func TestCSVErrorsNameLineAndColumn(t *testing.T) {
	tests := []struct {
		name, in string
		cfg      CSVConfig
		line     int
		col      int
		msg      string
	}{
		{"ragged", "a,b\n1,2\n3\n", CSVConfig{}, 3, 0, "1 fields, want 2"},
		{"text", "a,b\n1,2\n3,x\n", CSVConfig{}, 3, 2, `"x" is not a finite number`},
		{"nan", "a,b\n1,NaN\n", CSVConfig{}, 2, 2, "not a finite"},
		{"inf", "a,b\n1,2\n+Inf,2\n", CSVConfig{}, 3, 1, "not a finite"},
		{"range", "a,b\n1,1e39\n", CSVConfig{}, 2, 2, "float32 range"},
		{"label", "a,y\n1,2\n1,cat\n", CSVConfig{Label: "y"}, 3, 2, "class index"},
		{"negative label", "a,y\n1,-2\n", CSVConfig{Label: "y"}, 2, 2, "class index"},
		{"missing label col", "a,b\n1,2\n", CSVConfig{Label: "y"}, 1, 0, `no label column "y"`},
		{"skip", "junk\na,b\n1,2\n1,z\n", CSVConfig{SkipLines: 1}, 4, 2, `"z"`},
		{"quote", "a,b\n1,\"2\n", CSVConfig{}, 2, 0, ""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ReadCSV(strings.NewReader(tc.in), "in.csv", tc.cfg)
			var pe *ParseError
			require.True(t, errors.As(err, &pe), "%v", err)
			require.Equal(t, "in.csv", pe.File)
			require.Equal(t, tc.line, pe.Line, err.Error())
			if tc.col > 0 {
				require.Equal(t, tc.col, pe.Column, err.Error())
			}
			require.Contains(t, err.Error(), tc.msg)
		})
	}
}

func TestCSVSelectionAndPartialLabels(t *testing.T) {
	in := "x, y ,label,z\n1,2,0,3\n4,5,,6\n7,8,1,9\n\n"
	d, err := ReadCSV(strings.NewReader(in), "t", CSVConfig{Columns: []string{"z", "x"}, Label: "label"})
	require.NoError(t, err)
	require.Equal(t, []string{"z", "x"}, d.Columns)
	require.Equal(t, []float32{3, 1, 6, 4, 9, 7}, d.X)
	require.Equal(t, []int{0, Unlabelled, 1}, d.Labels)
	d, err = ReadCSV(strings.NewReader(in), "t", CSVConfig{Label: "label"})
	require.NoError(t, err)
	require.Equal(t, []string{"x", "y", "z"}, d.Columns)
	_, err = ReadCSV(strings.NewReader(in), "t", CSVConfig{Columns: []string{"label"}, Label: "label"})
	require.ErrorIs(t, err, ErrConfig)
}

func idxBytes(typ byte, dims []uint32, payload []byte) []byte {
	var b bytes.Buffer
	b.Write([]byte{0, 0, typ, byte(len(dims))})
	for _, d := range dims {
		binary.Write(&b, binary.BigEndian, d)
	}
	b.Write(payload)
	return b.Bytes()
}

func gz(b []byte) []byte {
	var out bytes.Buffer
	w := gzip.NewWriter(&out)
	w.Write(b)
	w.Close()
	return out.Bytes()
}

func TestIDXValidation(t *testing.T) {
	dir := t.TempDir()
	write := func(name string, b []byte) string {
		p := filepath.Join(dir, name)
		require.NoError(t, os.WriteFile(p, b, 0o644))
		return p
	}
	good := idxBytes(0x08, []uint32{2, 2, 2}, []byte{0, 255, 1, 2, 3, 4, 5, 6})
	d, err := LoadIDX(write("good", good), IDXConfig{Raw: true})
	require.NoError(t, err)
	require.Equal(t, []float32{0, 255, 1, 2, 3, 4, 5, 6}, d.X)
	require.Equal(t, []int{2, 2, 1}, d.Image)
	f64 := idxBytes(0x0E, []uint32{1, 2}, binary.BigEndian.AppendUint64(binary.BigEndian.AppendUint64(nil, math.Float64bits(1.5)), math.Float64bits(-2)))
	d, err = LoadIDX(write("f64", f64), IDXConfig{})
	require.NoError(t, err)
	require.Equal(t, []float32{1.5, -2}, d.X)

	bad := map[string][]byte{
		"magic":     append([]byte{1, 2}, good[2:]...),
		"type":      idxBytes(0x07, []uint32{1}, []byte{1}),
		"truncated": good[:len(good)-1],
		"long":      append(append([]byte{}, good...), 9),
		"dims0":     idxBytes(0x08, []uint32{0}, nil),
		"ndims":     idxBytes(0x08, []uint32{1, 1, 1, 1, 1}, []byte{1}),
		"header":    good[:6],
		// declares 2^31 values with a tiny body, compressed: must fail
		// without allocating gigabytes.
		"hostile.gz": gz(idxBytes(0x08, []uint32{1 << 15, 1 << 16}, []byte{1, 2, 3})),
		"huge":       idxBytes(0x0E, []uint32{1 << 16, 1 << 16}, nil),
		"nan":        idxBytes(0x0D, []uint32{1}, binary.BigEndian.AppendUint32(nil, math.Float32bits(float32(math.NaN())))),
	}
	for name, b := range bad {
		var ms0, ms1 runtime.MemStats
		runtime.ReadMemStats(&ms0)
		_, err := LoadIDX(write(name, b), IDXConfig{})
		runtime.ReadMemStats(&ms1)
		var pe *ParseError
		var le *LimitError
		require.True(t, errors.As(err, &pe) || errors.As(err, &le), "%s: %v", name, err)
		require.Less(t, ms1.TotalAlloc-ms0.TotalAlloc, uint64(16<<20), name)
	}
	lbl := write("lbl", idxBytes(0x08, []uint32{3}, []byte{1, 2, 3}))
	_, err = LoadIDX(write("good2", good), IDXConfig{Labels: lbl})
	require.ErrorContains(t, err, "labels have shape")
}

func TestDetectByContent(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "looks-like.csv")
	require.NoError(t, os.WriteFile(p, gz(idxBytes(0x08, []uint32{1, 2}, []byte{1, 2})), 0o644))
	f, err := Detect(p)
	require.NoError(t, err)
	require.Equal(t, FormatIDX, f)
	q := filepath.Join(dir, "numbers.idx")
	require.NoError(t, os.WriteFile(q, gz([]byte("a,b\n1,2\n")), 0o644))
	f, err = Detect(q)
	require.NoError(t, err)
	require.Equal(t, FormatCSV, f)
	d, f, err := Load(q, LoadConfig{})
	require.NoError(t, err)
	require.Equal(t, FormatCSV, f)
	require.Equal(t, []float32{1, 2}, d.X)
	f, err = Detect(dir)
	require.NoError(t, err)
	require.Equal(t, FormatImages, f)
	_, err = Detect(filepath.Join(dir, "missing"))
	require.Error(t, err)
}

func TestImagesFolder(t *testing.T) {
	dir := t.TempDir()
	for i := 0; i < 3; i++ {
		v := make([]float32, 4*3)
		for j := range v {
			v[j] = float32(i*12+j) / 35
		}
		require.NoError(t, WritePNG(filepath.Join(dir, "img"+string(rune('a'+i))+".png"), v, 4, 3, 1))
	}
	d, classes, err := LoadImages(dir, ImageConfig{})
	require.NoError(t, err)
	require.Nil(t, classes)
	require.Equal(t, 3, d.Rows)
	require.Equal(t, []int{4, 3, 1}, d.Image)
	for j, v := range d.X {
		require.InDelta(t, float64(j)/35, v, 0.5/255+1e-6) // 8-bit quantisation
	}
	// A different size names the file.
	require.NoError(t, WritePNG(filepath.Join(dir, "z.png"), make([]float32, 6), 2, 3, 1))
	_, _, err = LoadImages(dir, ImageConfig{})
	require.ErrorContains(t, err, "z.png")
	require.ErrorContains(t, err, "3x2")
	require.NoError(t, os.Remove(filepath.Join(dir, "z.png")))
	// A colour image among grey ones names the file.
	require.NoError(t, WritePNG(filepath.Join(dir, "y.png"), make([]float32, 36), 4, 3, 3))
	_, _, err = LoadImages(dir, ImageConfig{})
	require.ErrorContains(t, err, "y.png")
	require.ErrorContains(t, err, "channel")
	d, _, err = LoadImages(dir, ImageConfig{Grey: true})
	require.NoError(t, err)
	require.Equal(t, 4, d.Rows)
	// Class subfolders.
	cdir := t.TempDir()
	for _, c := range []string{"pump", "valve"} {
		require.NoError(t, os.Mkdir(filepath.Join(cdir, c), 0o755))
		require.NoError(t, WritePNG(filepath.Join(cdir, c, "1.png"), make([]float32, 4), 2, 2, 1))
	}
	d, classes, err = LoadImages(cdir, ImageConfig{})
	require.NoError(t, err)
	require.Equal(t, []string{"pump", "valve"}, classes)
	require.Equal(t, []int{0, 1}, d.Labels)
	require.NoError(t, os.WriteFile(filepath.Join(dir, "broken.png"), []byte("\x89PNG nope"), 0o644))
	_, _, err = LoadImages(dir, ImageConfig{Grey: true})
	require.ErrorContains(t, err, "broken.png")
}

func TestSplitAndBatches(t *testing.T) {
	x := make([]float32, 103*2)
	for i := range x {
		x[i] = float32(i)
	}
	d, err := New(x, 103, 2)
	require.NoError(t, err)
	tr, va, err := d.Split(0.2, rand.New(rand.NewPCG(1, 1)))
	require.NoError(t, err)
	require.Equal(t, 82, tr.Rows)
	require.Equal(t, 21, va.Rows)
	tr2, _, _ := d.Split(0.2, rand.New(rand.NewPCG(1, 1)))
	require.Equal(t, tr.X, tr2.X)
	seen := map[float32]bool{}
	for _, s := range []*Dataset{tr, va} {
		for i := 0; i < s.Rows; i++ {
			seen[s.Row(i)[0]] = true
		}
	}
	require.Len(t, seen, 103)

	b, err := NewBatches(d, BatchConfig{Size: 10}, rand.New(rand.NewPCG(2, 2)))
	require.NoError(t, err)
	require.Equal(t, 11, b.Len())
	require.Equal(t, 3, b.Rows(10))
	order := func() []int {
		b.Shuffle()
		var all []int
		buf := make([]float32, 20)
		for i := 0; i < b.Len(); i++ {
			b.Gather(i, buf[:b.Rows(i)*2], nil)
			for k := 0; k < b.Rows(i); k++ {
				all = append(all, int(buf[2*k])/2)
			}
		}
		return all
	}
	e1, e2 := order(), order()
	require.NotEqual(t, e1, e2, "each epoch reshuffles")
	require.ElementsMatch(t, e1, e2)
	require.Len(t, e1, 103)
	require.Zero(t, testing.AllocsPerRun(10, func() { b.Shuffle() }))
	bd, _ := NewBatches(d, BatchConfig{Size: 10, DropPartial: true, InOrder: true}, nil)
	require.Equal(t, 10, bd.Len())
	_, err = NewBatches(d, BatchConfig{}, nil)
	require.ErrorIs(t, err, ErrConfig)
	_, _, err = d.Split(1, rand.New(rand.NewPCG(1, 1)))
	require.ErrorIs(t, err, ErrConfig)
	_, err = New([]float32{1, float32(math.Inf(1))}, 1, 2)
	require.Error(t, err)
}

// Standardised columns have mean 0 and standard deviation 1, checked with
// gonum's stat.MeanStdDev (population form: the unbiased deviation times
// sqrt((n-1)/n)).
func TestScalers(t *testing.T) {
	bc, err := LoadCSV("../testdata/sklearn/breast_cancer.csv", CSVConfig{NoHeader: true, SkipLines: 1, Label: "c30"})
	require.NoError(t, err)
	s, err := Fit(ScaleStandard, bc)
	require.NoError(t, err)
	z, err := s.Apply(bc)
	require.NoError(t, err)
	n := float64(bc.Rows)
	for j := 0; j < bc.Cols; j++ {
		col := make([]float64, bc.Rows)
		for i := range col {
			col[i] = float64(z.Row(i)[j])
		}
		m, sd := stat.MeanStdDev(col, nil)
		require.InDelta(t, 0, m, 1e-5)
		require.InDelta(t, 1, sd*math.Sqrt((n-1)/n), 1e-5)
	}
	back := append([]float32(nil), z.X...)
	s.InvertRows(back)
	for i, v := range back {
		require.InDelta(t, bc.X[i], v, 1e-3*(1+math.Abs(float64(v))))
	}
	mm, err := Fit(ScaleMinMax, bc)
	require.NoError(t, err)
	u, _ := mm.Apply(bc)
	lo, hi := float32(1), float32(0)
	for _, v := range u.X {
		lo, hi = min(lo, v), max(hi, v)
	}
	require.InDelta(t, 0, lo, 1e-6)
	require.InDelta(t, 1, hi, 1e-6)
	c, _ := New([]float32{5, 1, 5, 2}, 2, 2)
	sc, err := Fit(ScaleStandard, c)
	require.NoError(t, err)
	cz, _ := sc.Apply(c)
	require.Equal(t, float32(0), cz.X[0])
	require.NoError(t, sc.Validate(2))
	require.Error(t, sc.Validate(3))
	_, err = Fit("log", c)
	require.ErrorIs(t, err, ErrConfig)
}

func TestFingerprint(t *testing.T) {
	a, _ := New([]float32{1, 2, 3, 4}, 2, 2)
	b, _ := New([]float32{1, 2, 3, 4}, 2, 2)
	c, _ := New([]float32{1, 2, 3, 4}, 1, 4)
	require.Equal(t, a.Fingerprint(), b.Fingerprint())
	require.NotEqual(t, a.Fingerprint(), c.Fingerprint())
	b.Labels = []int{0, 1}
	require.NotEqual(t, a.Fingerprint(), b.Fingerprint())
}
