package main

import (
	"bytes"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/parquet-go/parquet-go"
	"github.com/quernlab/quern/modelfile"
	"github.com/stretchr/testify/require"
)

type gauges struct {
	A float64 `parquet:"a"`
	B float64 `parquet:"b"`
	C float64 `parquet:"c"`
	D float64 `parquet:"d"`
	E float64 `parquet:"e"`
	F float64 `parquet:"f"`
}

// writeGauges writes the same invented rows (six gauges driven by two
// causes) as CSV and as Parquet, in row groups of 1000.
func writeGauges(t *testing.T, dir string, rows int) (csvPath, pqPath string) {
	t.Helper()
	rng := rand.New(rand.NewPCG(8, 8))
	var b bytes.Buffer
	b.WriteString("a,b,c,d,e,f\n")
	gs := make([]gauges, rows)
	for i := range gs {
		u, v := rng.NormFloat64(), rng.NormFloat64()
		g := gauges{u, v, u + v, u - v, 2*u + 0.1*rng.NormFloat64(), 10 + v + 0.1*rng.NormFloat64()}
		// the CSV's text and the Parquet's doubles are the same numbers
		for _, p := range []*float64{&g.A, &g.B, &g.C, &g.D, &g.E, &g.F} {
			*p = float64(float32(*p))
		}
		gs[i] = g
		fmt.Fprintf(&b, "%v,%v,%v,%v,%v,%v\n", float32(g.A), float32(g.B), float32(g.C), float32(g.D), float32(g.E), float32(g.F))
	}
	csvPath, pqPath = filepath.Join(dir, "gauges.csv"), filepath.Join(dir, "gauges.parquet")
	require.NoError(t, os.WriteFile(csvPath, b.Bytes(), 0o644))
	fh, err := os.Create(pqPath)
	require.NoError(t, err)
	w := parquet.NewGenericWriter[gauges](fh, parquet.MaxRowsPerRowGroup(1000))
	_, err = w.Write(gs)
	require.NoError(t, err)
	require.NoError(t, w.Close())
	require.NoError(t, fh.Close())
	return csvPath, pqPath
}

// Streamed training writes the same model at 1 and 2 threads; streamed
// scores equal in-memory scores, byte for byte, from CSV and from
// Parquet; what a stream cannot do is said in the flags' words.
func TestStreamCommands(t *testing.T) {
	dir := t.TempDir()
	csvPath, pqPath := writeGauges(t, dir, 6000)
	args := []string{"train", "-stream", "-epochs", "3", "-hidden", "8", "-latent", "2", "-seed", "3", "-buffer", "2000", "-quiet"}
	r := ok(t, quern(t, dir, []string{"GOMAXPROCS=1"}, append(args, "-data", csvPath, "-out", "s1.qm")...))
	require.Contains(t, r.stderr, "3 epochs on")
	require.Contains(t, r.stderr, "streamed rows")
	ok(t, quern(t, dir, []string{"GOMAXPROCS=2"}, append(args, "-data", csvPath, "-out", "s2.qm")...))
	a, err := os.ReadFile(filepath.Join(dir, "s1.qm"))
	require.NoError(t, err)
	b, err := os.ReadFile(filepath.Join(dir, "s2.qm"))
	require.NoError(t, err)
	require.True(t, bytes.Equal(a, b), "streamed training at 1 and 2 threads wrote different models")
	// parsing the text on every pass instead of reading the binary copy:
	// the same rows in the same order, so the same weights (the files
	// differ only in saying where the rows were read from)
	ok(t, quern(t, dir, nil, append(args, "-data", csvPath, "-cache", "none", "-out", "s3.qm")...))
	fa, err := modelfile.Read(filepath.Join(dir, "s1.qm"), 0)
	require.NoError(t, err)
	fc, err := modelfile.Read(filepath.Join(dir, "s3.qm"), 0)
	require.NoError(t, err)
	require.Equal(t, len(fa.Tensors), len(fc.Tensors))
	for i := range fa.Tensors {
		require.Equal(t, fa.Tensors[i].F32, fc.Tensors[i].F32, "-cache none trained other weights: %s", fa.Tensors[i].Name)
	}
	left, _ := filepath.Glob(filepath.Join(os.TempDir(), "quern-stream-*"))
	require.Empty(t, left, "a binary copy was left behind")
	ok(t, quern(t, dir, nil, append(args, "-data", pqPath, "-out", "p.qm")...))

	ok(t, quern(t, dir, nil, "score", "-model", "s1.qm", "-data", csvPath, "-out", "mem.csv", "-quiet"))
	r = ok(t, quern(t, dir, nil, "score", "-model", "s1.qm", "-data", csvPath, "-stream", "-out", "str.csv"))
	require.Contains(t, r.stderr, "scored 6000 rows")
	require.Contains(t, r.stderr, "decision aid")
	ok(t, quern(t, dir, nil, "score", "-model", "s1.qm", "-data", pqPath, "-stream", "-out", "pq.csv", "-quiet"))
	ok(t, quern(t, dir, nil, "score", "-model", "s1.qm", "-data", pqPath, "-out", "pqmem.csv", "-quiet"))
	mem, _ := os.ReadFile(filepath.Join(dir, "mem.csv"))
	for _, f := range []string{"str.csv", "pq.csv", "pqmem.csv"} {
		got, err := os.ReadFile(filepath.Join(dir, f))
		require.NoError(t, err)
		require.Equal(t, string(mem), string(got), f)
	}

	// an empty cell past the first column, far into the file: the error
	// names it, and no scores file stands for a whole one
	whole, err := os.ReadFile(csvPath)
	require.NoError(t, err)
	lines := strings.Split(string(whole), "\n")
	cells := strings.Split(lines[4500], ",")
	cells[2] = ""
	lines[4500] = strings.Join(cells, ",")
	require.NoError(t, os.WriteFile(filepath.Join(dir, "holes.csv"), []byte(strings.Join(lines, "\n")), 0o644))
	r = quern(t, dir, nil, "score", "-model", "s1.qm", "-data", "holes.csv", "-stream", "-out", "holes-scores.csv")
	require.Equal(t, 1, r.code, r.stderr)
	require.Contains(t, r.stderr, `holes.csv:4501: column 3 (c): "" is not a finite number`)
	left, _ = filepath.Glob(filepath.Join(dir, "*holes-scores*"))
	require.Empty(t, left, "a scores file cut short was left")

	// a Parquet file with text columns, scored in memory by the model's
	// column names as a CSV file is (testdata/parquet/README.md)
	at := abs("../../testdata/parquet/alltypes_plain.parquet")
	num := "id,bool_col,tinyint_col,smallint_col,int_col,bigint_col,float_col,double_col"
	ok(t, quern(t, dir, nil, "train", "-data", at, "-columns", num, "-hidden", "4", "-latent", "2", "-epochs", "2", "-val", "0.25", "-folds", "0", "-out", "at.qm", "-quiet"))
	ok(t, quern(t, dir, nil, "score", "-model", "at.qm", "-data", at, "-out", "at-mem.csv", "-quiet"))
	ok(t, quern(t, dir, nil, "score", "-model", "at.qm", "-data", at, "-stream", "-out", "at-str.csv", "-quiet"))
	am, _ := os.ReadFile(filepath.Join(dir, "at-mem.csv"))
	as, _ := os.ReadFile(filepath.Join(dir, "at-str.csv"))
	require.Equal(t, string(am), string(as))
	require.Equal(t, 9, strings.Count(string(am), "\n"))

	require.NoError(t, os.WriteFile(filepath.Join(dir, "text.csv"), []byte("a,b\n1,2\n3,high\n"), 0o644))
	for _, c := range []struct {
		args []string
		code int
		want string
	}{
		{[]string{"train", "-stream", "-kind", "gan", "-data", csvPath, "-out", "x.qm"}, 2, "-stream with -kind gan"},
		{[]string{"train", "-stream", "-report", "rep", "-data", csvPath, "-out", "x.qm"}, 2, "-report with -stream"},
		{[]string{"train", "-stream", "-folds", "3", "-data", csvPath, "-out", "x.qm"}, 2, "-folds 3 with -stream"},
		{[]string{"train", "-buffer", "10", "-data", csvPath, "-out", "x.qm"}, 2, "-buffer is for a streamed run: give -stream"},
		{[]string{"train", "-stream", "-cache", "nosuch", "-data", csvPath, "-out", "x.qm"}, 2, "-cache nosuch: not a folder"},
		{[]string{"train", "-stream", "-data", "-", "-out", "x.qm"}, 2, "give -data FILE (not standard input)"},
		{[]string{"train", "-stream", "-data", "text.csv", "-out", "x.qm"}, 1, `text.csv:3: column 2 (b): "high" is not a finite number`},
		{[]string{"score", "-stream", "-heatmaps", "h", "-model", "s1.qm", "-data", csvPath}, 2, "-heatmaps with -stream"},
		{[]string{"train", "-stream", "-types", "a=categorical", "-data", csvPath, "-out", "x.qm"}, 2, "-types and -missing with -stream"},
	} {
		r := quern(t, dir, nil, c.args...)
		require.Equal(t, c.code, r.code, "%v: %s", c.args, r.stderr)
		require.Contains(t, r.stderr, c.want, "%v", c.args)
		require.Equal(t, 1, strings.Count(strings.TrimSpace(r.stderr), "\n")+1, "%v: more than one line: %s", c.args, r.stderr)
	}
}
