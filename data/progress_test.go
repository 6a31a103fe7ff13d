package data_test

import (
	"bytes"
	"compress/gzip"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/stretchr/testify/require"
)

// Progress reports the bytes read from the file (compressed bytes for
// gzip), rising, ending at the file's size; the loaded rows are those of
// a load without it. Common practice, no source.
func TestLoadProgress(t *testing.T) {
	dir := t.TempDir()
	var b bytes.Buffer
	b.WriteString("a,b,c\n")
	for i := 0; i < 200000; i++ {
		fmt.Fprintf(&b, "%d,%d.5,%d\n", i, i%97, -i)
	}
	plain := filepath.Join(dir, "p.csv")
	require.NoError(t, os.WriteFile(plain, b.Bytes(), 0o644))
	var z bytes.Buffer
	zw := gzip.NewWriter(&z)
	zw.Write(b.Bytes())
	require.NoError(t, zw.Close())
	packed := filepath.Join(dir, "z.csv.gz")
	require.NoError(t, os.WriteFile(packed, z.Bytes(), 0o644))
	want, _, err := data.Load(plain, data.LoadConfig{})
	require.NoError(t, err)
	for _, c := range []struct {
		path string
		size int64
	}{{plain, int64(b.Len())}, {packed, int64(z.Len())}} {
		var calls, last int64
		got, _, err := data.Load(c.path, data.LoadConfig{Progress: func(done, total int64) {
			require.Equal(t, c.size, total, c.path)
			require.GreaterOrEqual(t, done, last, "rising")
			calls++
			last = done
		}})
		require.NoError(t, err)
		require.Equal(t, want.X, got.X)
		require.Equal(t, c.size, last, "%s: the last call is at the end of the file", c.path)
		require.Greater(t, calls, int64(1), c.path)
	}
}

// SplitInPlace gives, row for row and label for label, the parts Split
// gives for the same generator, in d's own memory.
func TestSplitInPlaceEqualsSplit(t *testing.T) {
	for _, rows := range []int{2, 3, 10, 1001} {
		x := make([]float32, rows*3)
		labels := make([]int, rows)
		for i := range x {
			x[i] = float32(i)
		}
		for i := range labels {
			labels[i] = i % 7
		}
		d, err := data.New(x, rows, 3)
		require.NoError(t, err)
		d.Labels = labels
		tr, va, err := d.Split(0.3, rand.New(rand.NewPCG(9, 9)))
		require.NoError(t, err)
		c, err := data.New(append([]float32(nil), x...), rows, 3)
		require.NoError(t, err)
		c.Labels = append([]int(nil), labels...)
		tr2, va2, err := c.SplitInPlace(0.3, rand.New(rand.NewPCG(9, 9)))
		require.NoError(t, err)
		require.Equal(t, tr.X, tr2.X)
		require.Equal(t, va.X, va2.X)
		require.Equal(t, tr.Labels, tr2.Labels)
		require.Equal(t, va.Labels, va2.Labels)
		require.Same(t, &c.X[0], &tr2.X[0], "a view, not a copy")
		require.Equal(t, rows*3, cap(tr2.X)+cap(va2.X), "views do not overlap")
	}
}

// A gzip idx file of known size gets its values in one allocation of
// exactly the declared count (no doubling, no copies), and a tiny file
// that declares a large shape is refused without its declared memory
// being set aside. Common practice, no source.
func TestIDXGzipAllocation(t *testing.T) {
	var raw bytes.Buffer
	raw.Write([]byte{0, 0, 0x08, 2, 0, 0, 0x27, 0x10, 0, 0, 0, 100}) // 10000 x 100 bytes
	raw.Write(bytes.Repeat([]byte{7}, 10000*100))
	var z bytes.Buffer
	zw := gzip.NewWriter(&z)
	zw.Write(raw.Bytes())
	require.NoError(t, zw.Close())
	a, err := data.ReadIDX(bytes.NewReader(z.Bytes()), "x.gz", int64(z.Len()), data.Limits{})
	require.NoError(t, err)
	require.Len(t, a.Values, 10000*100)
	require.Equal(t, len(a.Values), cap(a.Values), "one allocation of the declared count")

	var bomb bytes.Buffer
	bomb.Write([]byte{0, 0, 0x08, 2, 0, 0x40, 0, 0, 0, 0, 0x10, 0}) // 4194304 x 4096 bytes declared
	bomb.Write(make([]byte, 100))
	z.Reset()
	zw = gzip.NewWriter(&z)
	zw.Write(bomb.Bytes())
	require.NoError(t, zw.Close())
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	_, err = data.ReadIDX(bytes.NewReader(z.Bytes()), "bomb.gz", int64(z.Len()), data.Limits{Values: 1 << 40, Bytes: 1 << 40, Rows: 1 << 30})
	runtime.ReadMemStats(&after)
	require.Error(t, err)
	require.Less(t, after.TotalAlloc-before.TotalAlloc, uint64(64<<20), "a %d-byte file sets aside no more than its expansion could fill", z.Len())
}

// A gzip idx file whose checksum is wrong, or whose trailer is cut off,
// is refused even though every declared value arrived.
func TestIDXGzipTrailerChecked(t *testing.T) {
	var raw bytes.Buffer
	raw.Write([]byte{0, 0, 0x08, 1, 0, 0, 0, 100})
	raw.Write(bytes.Repeat([]byte{3}, 100))
	var z bytes.Buffer
	zw := gzip.NewWriter(&z)
	zw.Write(raw.Bytes())
	require.NoError(t, zw.Close())
	good := z.Bytes()
	_, err := data.ReadIDX(bytes.NewReader(good), "ok.gz", int64(len(good)), data.Limits{})
	require.NoError(t, err)
	badCRC := append([]byte(nil), good...)
	badCRC[len(badCRC)-8] ^= 0xff // the CRC-32 of the trailer (RFC 1952, 2.3.1)
	_, err = data.ReadIDX(bytes.NewReader(badCRC), "crc.gz", int64(len(badCRC)), data.Limits{})
	require.ErrorContains(t, err, "crc.gz")
	cut := good[:len(good)-4]
	_, err = data.ReadIDX(bytes.NewReader(cut), "cut.gz", int64(len(cut)), data.Limits{})
	require.ErrorContains(t, err, "cut.gz")
}

// A stray quote (a bare one, as in 12" for inches) is reported at its own
// line, however long the file goes on after it; an unterminated quoted
// field is reported at the line it opens.
func TestCSVStrayQuotes(t *testing.T) {
	var b strings.Builder
	b.WriteString("a,b\n1,2\n3,12\"\n")
	for i := 0; i < 50000; i++ {
		b.WriteString("5,6\n")
	}
	_, err := data.ReadCSV(strings.NewReader(b.String()), "q.csv", data.CSVConfig{})
	var pe *data.ParseError
	require.ErrorAs(t, err, &pe)
	require.Equal(t, 3, pe.Line, err.Error())
	_, err = data.ReadCSV(strings.NewReader("a,b\n1,2\n3,\"open\n5,6\n7,8\n"), "o.csv", data.CSVConfig{})
	require.ErrorAs(t, err, &pe)
	require.Equal(t, 3, pe.Line, err.Error())
	var long strings.Builder
	long.WriteString("a,b\n1,\"open\n")
	for i := 0; i < 3000; i++ {
		long.WriteString("5,6\n")
	}
	_, err = data.ReadCSV(strings.NewReader(long.String()), "l.csv", data.CSVConfig{Limits: data.Limits{Line: 1024}})
	var le *data.LimitError
	require.ErrorAs(t, err, &le, "an open quoted field is bounded by the line limit")
}
