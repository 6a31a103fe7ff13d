package data

import (
	"bytes"
	"compress/gzip"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"github.com/stretchr/testify/require"
)

func writeNumbers(t *testing.T, path string, rows, cols int, zip bool) {
	t.Helper()
	rng := rand.New(rand.NewPCG(3, 4))
	var b bytes.Buffer
	for j := range cols {
		if j > 0 {
			b.WriteByte(',')
		}
		fmt.Fprintf(&b, "x%d", j)
	}
	b.WriteByte('\n')
	for range rows {
		for j := range cols {
			if j > 0 {
				b.WriteByte(',')
			}
			fmt.Fprintf(&b, "%.5f", float64(j)+rng.NormFloat64()*float64(j+1))
		}
		b.WriteByte('\n')
	}
	out := b.Bytes()
	if zip {
		var z bytes.Buffer
		w := gzip.NewWriter(&z)
		w.Write(out)
		w.Close()
		out = z.Bytes()
	}
	require.NoError(t, os.WriteFile(path, out, 0o644))
}

// A stream gives the file's rows as LoadCSV reads them, splits them the
// same way on every pass, and fits scalers on all training rows as Fit
// does in memory (the running mean and squared deviations of Welford,
// "Note on a method for calculating corrected sums of squares and
// products", Technometrics 4, 1962, against Fit's two passes: 1e-9).
func TestStreamMatchesLoad(t *testing.T) {
	dir := t.TempDir()
	for _, zip := range []bool{false, true} {
		path := filepath.Join(dir, fmt.Sprintf("t%v.csv", zip))
		writeNumbers(t, path, 50000, 5, zip)
		d, err := LoadCSV(path, CSVConfig{})
		require.NoError(t, err)
		s, err := OpenStream(path, StreamConfig{Validation: 0.2, SplitSeed: 9, Sample: 1000})
		require.NoError(t, err)
		require.Equal(t, d.Rows, s.Rows)
		require.Equal(t, d.Columns, s.Columns)
		require.Equal(t, s.Rows, s.TrainRows+s.ValRows)
		require.InDelta(t, 0.2, float64(s.ValRows)/float64(s.Rows), 0.01)
		require.Equal(t, 1000, s.Sample.Rows)
		var all, tr, va []float32
		require.NoError(t, s.Each(AllRows, func(x []float32, n int) error { all = append(all, x...); return nil }))
		require.Equal(t, d.X, all)
		require.NoError(t, s.Each(TrainRows, func(x []float32, n int) error { tr = append(tr, x...); return nil }))
		require.NoError(t, s.Each(ValRows, func(x []float32, n int) error { va = append(va, x...); return nil }))
		require.Len(t, tr, s.TrainRows*5)
		require.Len(t, va, s.ValRows*5)
		// the same split twice
		var tr2 []float32
		require.NoError(t, s.Each(TrainRows, func(x []float32, n int) error { tr2 = append(tr2, x...); return nil }))
		require.Equal(t, tr, tr2)
		want, err := Fit(ScaleStandard, &Dataset{Rows: s.TrainRows, Cols: 5, X: tr})
		require.NoError(t, err)
		got, err := Fit(ScaleStandard, s.Bounds(TrainRows))
		require.NoError(t, err)
		for j := range 5 {
			require.InDelta(t, want.Offset[j], got.Offset[j], 1e-9*math.Max(1, math.Abs(want.Offset[j])))
			require.InDelta(t, want.Factor[j], got.Factor[j], 1e-9*want.Factor[j])
		}
		wmm, _ := Fit(ScaleMinMax, &Dataset{Rows: s.TrainRows, Cols: 5, X: tr})
		gmm, _ := Fit(ScaleMinMax, s.Bounds(TrainRows))
		require.Equal(t, wmm, gmm)
		// the sample is training rows, in file order
		in := map[string]bool{}
		for i := 0; i < s.TrainRows; i++ {
			in[fmt.Sprint(tr[i*5:(i+1)*5])] = true
		}
		for i := range s.Sample.Rows {
			require.True(t, in[fmt.Sprint(s.Sample.Row(i))])
		}
		require.NotEmpty(t, s.Fingerprint)
		// with a binary copy of the rows: the same passes, and the file
		// is not read again
		cached, err := OpenStream(path, StreamConfig{Validation: 0.2, SplitSeed: 9, Sample: 1000, CacheDir: dir})
		require.NoError(t, err)
		var ctr, csh, wsh []float32
		require.NoError(t, cached.Each(TrainRows, func(x []float32, n int) error { ctr = append(ctr, x...); return nil }))
		require.Equal(t, tr, ctr)
		require.NoError(t, cached.EachShuffled(TrainRows, rand.New(rand.NewPCG(5, 5)), func(x []float32, n int) error { csh = append(csh, x...); return nil }))
		require.Equal(t, sortedRows(tr, 5), sortedRows(csh, 5))
		if !zip {
			// the same blocks in the same order as the text's
			require.NoError(t, s.EachShuffled(TrainRows, rand.New(rand.NewPCG(5, 5)), func(x []float32, n int) error { wsh = append(wsh, x...); return nil }))
			require.Equal(t, wsh, csh)
		}
		require.Equal(t, s.Sample.X, cached.Sample.X)
		require.NoError(t, cached.Close())
		left, _ := filepath.Glob(filepath.Join(dir, "quern-stream-*"))
		require.Empty(t, left, "the binary copy outlived Close")
		// shuffled: the same training rows, in another order (a gzip
		// file's in file order: its bytes are read in turn)
		var sh []float32
		require.NoError(t, s.EachShuffled(TrainRows, rand.New(rand.NewPCG(1, 2)), func(x []float32, n int) error { sh = append(sh, x...); return nil }))
		require.Equal(t, sortedRows(tr, 5), sortedRows(sh, 5))
		if zip {
			require.Equal(t, tr, sh)
		} else {
			require.NotEqual(t, tr, sh)
		}
	}
}

func sortedRows(x []float32, cols int) []string {
	out := make([]string, 0, len(x)/cols)
	for i := 0; i < len(x); i += cols {
		out = append(out, fmt.Sprint(x[i:i+cols]))
	}
	slices.Sort(out)
	return out
}

// A file whose last row has no line end still shuffles whole rows.
func TestStreamShuffledLastLine(t *testing.T) {
	path := filepath.Join(t.TempDir(), "t.csv")
	var b bytes.Buffer
	b.WriteString("a,b\r\n")
	for i := range 3000 {
		fmt.Fprintf(&b, "%d,%d\r\n", i, -i)
	}
	b.WriteString("3000,-3000")
	require.NoError(t, os.WriteFile(path, b.Bytes(), 0o644))
	s, err := OpenStream(path, StreamConfig{})
	require.NoError(t, err)
	require.Equal(t, 3001, s.Rows)
	seen := map[float32]bool{}
	require.NoError(t, s.EachShuffled(AllRows, rand.New(rand.NewPCG(3, 3)), func(x []float32, n int) error {
		for r := range n {
			require.Equal(t, -x[2*r], x[2*r+1])
			seen[x[2*r]] = true
		}
		return nil
	}))
	require.Len(t, seen, 3001)
}

func TestStreamRefuses(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "t.csv")
	require.NoError(t, os.WriteFile(path, []byte("a,b\n1,2\n3,x\n"), 0o644))
	_, err := OpenStream(path, StreamConfig{})
	require.ErrorIs(t, err, ErrStream)
	require.ErrorContains(t, err, "t.csv:3: column 2 (b): \"x\" is not a finite number")
	require.ErrorContains(t, err, "categories and missing cells need the table in memory")
	_, err = OpenStream(path, StreamConfig{CSV: CSVConfig{Label: "a"}})
	require.ErrorIs(t, err, ErrStream)
	writeNumbers(t, path, 100, 3, false)
	s, err := OpenStream(path, StreamConfig{})
	require.NoError(t, err)
	writeNumbers(t, path, 90, 3, false)
	err = s.Each(AllRows, func([]float32, int) error { return nil })
	require.ErrorContains(t, err, "the file changed since it was first read")
}
