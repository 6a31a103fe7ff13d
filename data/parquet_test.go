package data

import (
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/parquet-go/parquet-go"
	"github.com/stretchr/testify/require"
)

const alltypes = "../testdata/parquet/alltypes_plain.parquet"

// A Parquet file written by another implementation (Apache Impala's, from
// Apache parquet-testing; testdata/parquet/README.md) reads as the
// values its alltypes table holds, whatever the column's type (int32,
// int64, boolean, float, double).
func TestParquetAlltypes(t *testing.T) {
	f, err := Detect(alltypes)
	require.NoError(t, err)
	require.Equal(t, FormatParquet, f)
	cols := []string{"id", "bool_col", "tinyint_col", "smallint_col", "int_col", "bigint_col", "float_col", "double_col"}
	d, _, err := Load(alltypes, LoadConfig{CSV: CSVConfig{Columns: cols}})
	require.NoError(t, err)
	require.Equal(t, cols, d.Columns)
	ids := []float32{4, 5, 6, 7, 2, 3, 0, 1}
	for i, id := range ids {
		want := []float32{id, 1, 0, 0, 0, 0, 0, 0}
		if int(id)%2 == 1 {
			want = []float32{id, 0, 1, 1, 1, 10, 1.1, float32(10.1)}
		}
		require.Equal(t, want, d.Row(i), "row %d", i+1)
	}
	// a text column is named, with its row, never read as a number
	_, err = LoadParquet(alltypes, CSVConfig{Columns: []string{"id", "string_col"}})
	require.ErrorContains(t, err, `row 1, column "string_col": a byte_array value, not a number`)
	_, err = LoadParquet(alltypes, CSVConfig{Columns: []string{"nosuch"}})
	require.ErrorContains(t, err, `no column "nosuch" (columns: id, bool_col,`)
	_, err = LoadParquet(alltypes, CSVConfig{Label: "id"})
	require.ErrorIs(t, err, ErrStream)
}

type pqRow struct {
	X0 float32 `parquet:"x0"`
	X1 float32 `parquet:"x1"`
	X2 float32 `parquet:"x2"`
	X3 float32 `parquet:"x3"`
	X4 float32 `parquet:"x4"`
}

// A stream of a Parquet file reads the rows a CSV file of the same
// numbers holds: the same values in file order, the same split and the
// same statistics; a shuffled pass reads its row groups in another
// order.
func TestParquetStreamMatchesCSV(t *testing.T) {
	dir := t.TempDir()
	csvPath := filepath.Join(dir, "t.csv")
	writeNumbers(t, csvPath, 20000, 5, false)
	d, err := LoadCSV(csvPath, CSVConfig{})
	require.NoError(t, err)
	pqPath := filepath.Join(dir, "t.parquet")
	fh, err := os.Create(pqPath)
	require.NoError(t, err)
	w := parquet.NewGenericWriter[pqRow](fh, parquet.MaxRowsPerRowGroup(3000))
	rows := make([]pqRow, d.Rows)
	for i := range rows {
		r := d.Row(i)
		rows[i] = pqRow{r[0], r[1], r[2], r[3], r[4]}
	}
	_, err = w.Write(rows)
	require.NoError(t, err)
	require.NoError(t, w.Close())
	require.NoError(t, fh.Close())

	cfg := StreamConfig{Validation: 0.25, SplitSeed: 4, Sample: 500}
	sc, err := OpenStream(csvPath, cfg)
	require.NoError(t, err)
	sp, err := OpenStream(pqPath, cfg)
	require.NoError(t, err)
	require.Equal(t, sc.Rows, sp.Rows)
	require.Equal(t, sc.TrainRows, sp.TrainRows)
	require.Equal(t, sc.Columns, sp.Columns)
	require.Equal(t, sc.Sample.X, sp.Sample.X)
	require.Equal(t, sc.Fingerprint, sp.Fingerprint)
	fc, _ := Fit(ScaleStandard, sc.Bounds(TrainRows))
	fp, _ := Fit(ScaleStandard, sp.Bounds(TrainRows))
	require.Equal(t, fc, fp)
	var all, sh []float32
	require.NoError(t, sp.Each(AllRows, func(x []float32, n int) error { all = append(all, x...); return nil }))
	require.Equal(t, d.X, all)
	require.NoError(t, sp.EachShuffled(TrainRows, rand.New(rand.NewPCG(1, 1)), func(x []float32, n int) error { sh = append(sh, x...); return nil }))
	var tr []float32
	require.NoError(t, sc.Each(TrainRows, func(x []float32, n int) error { tr = append(tr, x...); return nil }))
	require.Equal(t, sortedRows(tr, 5), sortedRows(sh, 5))
	require.NotEqual(t, tr, sh)
	// the rows streamed once, for scoring
	n := 0
	require.NoError(t, EachRows(pqPath, CSVConfig{Columns: []string{"x4", "x0"}}, func(cols []string, x []float32, _ []string, rows int) error {
		require.Equal(t, []string{"x4", "x0"}, cols)
		for r := range rows {
			require.Equal(t, []float32{d.Row(n + r)[4], d.Row(n + r)[0]}, x[2*r:2*r+2], fmt.Sprint(n+r))
		}
		n += rows
		return nil
	}))
	require.Equal(t, d.Rows, n)
}

// A CSV file whose first cell is PAR1 is a CSV file: a Parquet file ends
// with the magic bytes too.
func TestParquetMagicInCSV(t *testing.T) {
	path := filepath.Join(t.TempDir(), "genes.csv")
	require.NoError(t, os.WriteFile(path, []byte("PAR1,x\n1,2\n"), 0o644))
	f, err := Detect(path)
	require.NoError(t, err)
	require.Equal(t, FormatCSV, f)
}
