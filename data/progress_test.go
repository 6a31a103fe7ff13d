package data_test

import (
	"bytes"
	"compress/gzip"
	"fmt"
	"os"
	"path/filepath"
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
