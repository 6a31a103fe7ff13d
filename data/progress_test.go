package data_test

import (
	"bytes"
	"compress/gzip"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
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
