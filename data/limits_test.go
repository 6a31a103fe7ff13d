package data

import (
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"image"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"testing"

	"github.com/stretchr/testify/require"
)

// allocated runs f and returns the bytes it allocated.
func allocated(f func()) uint64 {
	var a, b runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&a)
	f()
	runtime.ReadMemStats(&b)
	return b.TotalAlloc - a.TotalAlloc
}

func gzipped(t *testing.T, parts ...[]byte) []byte {
	var b bytes.Buffer
	w, err := gzip.NewWriterLevel(&b, gzip.BestCompression)
	require.NoError(t, err)
	for _, p := range parts {
		_, err := w.Write(p)
		require.NoError(t, err)
	}
	require.NoError(t, w.Close())
	return b.Bytes()
}

// Every limit ends the read with a *LimitError naming it (and the line,
// for text), before memory is set aside for what goes beyond it. The
// bounds are common practice, no source.
func TestLimits(t *testing.T) {
	dir := t.TempDir()
	write := func(name string, b []byte) string {
		p := filepath.Join(dir, name)
		require.NoError(t, os.WriteFile(p, b, 0o644))
		return p
	}
	csv := "a,b,c\n1,2,3\n4,5,6\n7,8,9\n"
	for _, c := range []struct {
		name, key string
		lim       Limits
		line      int
	}{
		{"rows", "rows", Limits{Rows: 2}, 4},
		{"columns", "columns", Limits{Columns: 2}, 1},
		{"values", "values", Limits{Values: 7}, 4},
		{"line", "line", Limits{Line: 4}, 1},
		{"bytes", "bytes", Limits{Bytes: 10}, 0},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := LoadCSV(write(c.name+".csv", []byte(csv)), CSVConfig{Limits: c.lim})
			var le *LimitError
			require.True(t, errors.As(err, &le), "%v", err)
			require.Equal(t, c.key, le.Key)
			require.Equal(t, c.line, le.Line, "%v", err)
			require.NotContains(t, err.Error(), "\n")
			_, err = LoadCSV(write(c.name+"-ok.csv", []byte(csv)), CSVConfig{})
			require.NoError(t, err)
		})
	}

	// one 64 MiB line behind 64 KB of gzip: the default line limit
	// stops it having read about that limit (16 MiB), not the line.
	// encoding/csv grows its line buffer by a quarter at a time, so the
	// allocations add up to several times the limit (about 8.5 here).
	line := bytes.Repeat([]byte("1"), 64<<20)
	path := write("one-line.csv.gz", gzipped(t, []byte("a\n"), line, []byte("\n")))
	var err error
	n := allocated(func() { _, err = LoadCSV(path, CSVConfig{}) })
	var le *LimitError
	require.True(t, errors.As(err, &le), "%v", err)
	require.Equal(t, "line", le.Key)
	require.Equal(t, 2, le.Line)
	require.Less(t, n, uint64(12*DefaultLine), "%d bytes allocated", n)

	// idx: an expanding gzip header declares more rows, columns, values
	// or bytes than allowed
	for key, lim := range map[string]Limits{"rows": {Rows: 1}, "columns": {Columns: 3}, "values": {Values: 7}, "bytes": {Bytes: 20}} {
		_, err := LoadIDX(write("x-"+key, idxBytes(0x08, []uint32{2, 2, 2}, []byte{0, 1, 2, 3, 4, 5, 6, 7})), IDXConfig{Limits: lim})
		require.True(t, errors.As(err, &le), "%s: %v", key, err)
		require.Equal(t, key, le.Key)
	}

	// limits raised as far as they go: a shape whose product overflows
	// int64 is still refused (by the limits, compared without products)
	huge := Limits{Bytes: math.MaxInt64, Rows: math.MaxInt, Columns: math.MaxInt, Values: math.MaxInt64}
	_, err = ReadIDX(bytes.NewReader(gzipped(t, idxBytes(0x0E, []uint32{1 << 31, 1 << 31, 1 << 31}, nil))), "overflow.gz", -1, huge)
	require.True(t, errors.As(err, &le), "%v", err)

	// images: count, pixels, and all of them together
	imgs := filepath.Join(dir, "imgs")
	require.NoError(t, os.Mkdir(imgs, 0o755))
	for i := range 3 {
		var b bytes.Buffer
		require.NoError(t, png.Encode(&b, image.NewGray(image.Rect(0, 0, 4, 4))))
		require.NoError(t, os.WriteFile(filepath.Join(imgs, fmt.Sprintf("%d.png", i)), b.Bytes(), 0o644))
	}
	for key, lim := range map[string]Limits{"images": {Images: 2}, "pixels": {Pixels: 15}, "values": {Values: 47}} {
		_, _, err := LoadImages(imgs, ImageConfig{Limits: lim})
		require.True(t, errors.As(err, &le), "%s: %v", key, err)
		require.Equal(t, key, le.Key)
	}
	_, _, err = LoadImages(imgs, ImageConfig{Limits: Limits{Values: 48}})
	require.NoError(t, err)

	// a large first image and many files that are not images: refused
	// before room is made for all of them
	big := filepath.Join(dir, "big")
	require.NoError(t, os.Mkdir(big, 0o755))
	var b bytes.Buffer
	require.NoError(t, png.Encode(&b, image.NewGray(image.Rect(0, 0, 4096, 4096))))
	require.NoError(t, os.WriteFile(filepath.Join(big, "0000.png"), b.Bytes(), 0o644))
	for i := 1; i <= 2000; i++ {
		require.NoError(t, os.WriteFile(filepath.Join(big, fmt.Sprintf("%04d.png", i)), []byte{1}, 0o644))
	}
	n = allocated(func() { _, _, err = LoadImages(big, ImageConfig{}) })
	require.True(t, errors.As(err, &le), "%v", err)
	require.Equal(t, "values", le.Key)
	require.Less(t, n, uint64(256<<20), "%d bytes allocated", n)

	// limits given through Load reach every format; negative ones are refused
	_, _, err = Load(write("via-load.csv", []byte(csv)), LoadConfig{Limits: Limits{Rows: 1}})
	require.True(t, errors.As(err, &le), "%v", err)
	_, err = LoadCSV(write("neg.csv", []byte(csv)), CSVConfig{Limits: Limits{Rows: -1}})
	require.ErrorIs(t, err, ErrConfig)
	var l Limits
	for _, k := range LimitKeys {
		require.NoError(t, l.Set(k, 5))
	}
	require.Equal(t, Limits{Bytes: 5, Line: 5, Rows: 5, Columns: 5, Values: 5, Pixels: 5, Images: 5}, l)
	require.ErrorIs(t, l.Set("cells", 5), ErrConfig)
}

// A UTF-8 byte-order mark before the header is no part of the first
// column's name (spreadsheet programs write one).
func TestByteOrderMark(t *testing.T) {
	p := filepath.Join(t.TempDir(), "bom.csv")
	require.NoError(t, os.WriteFile(p, []byte("\ufeffspeed,load\n1,2\n"), 0o644))
	d, err := LoadCSV(p, CSVConfig{})
	require.NoError(t, err)
	require.Equal(t, []string{"speed", "load"}, d.Columns)
	d, err = LoadCSV(p, CSVConfig{Columns: []string{"speed"}})
	require.NoError(t, err)
	require.Equal(t, []float32{1}, d.X)
	require.NoError(t, os.WriteFile(p, []byte("\ufeff1,2\n"), 0o644))
	d, err = LoadCSV(p, CSVConfig{NoHeader: true})
	require.NoError(t, err)
	require.Equal(t, []float32{1, 2}, d.X)
}
