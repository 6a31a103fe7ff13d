package data

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// A table regrouped on disk gives, group by group, the rows GroupBy gives
// in memory, with the fingerprint and the encoding a typed reading of the
// whole table gives.
func TestPartitionMatchesGroupBy(t *testing.T) {
	dir := t.TempDir()
	var b bytes.Buffer
	b.WriteString("site,a,b\n")
	sites := []string{"n", "s", "e", "", "NA", " s "}
	for i := range 5000 {
		fmt.Fprintf(&b, "%s,%d,%.3f\n", sites[i%len(sites)], i%13, float64(i)*0.25)
	}
	path := filepath.Join(dir, "t.csv")
	require.NoError(t, os.WriteFile(path, b.Bytes(), 0o644))
	d, err := LoadCSV(path, CSVConfig{Keep: []string{"site"}, Exclude: []string{"site"}, Typed: true})
	require.NoError(t, err)
	keys := make([]string, d.Rows)
	for i := range keys {
		k := strings.TrimSpace(d.Kept[i])
		if k == "NA" {
			k = ""
		}
		keys[i] = k
	}
	fp, enc := d.Fingerprint(), d.Encoding
	groups, ungrouped, err := d.GroupBy(keys)
	require.NoError(t, err)

	p, err := PartitionCSV(path, CSVConfig{}, "site", DefaultMissing, dir)
	require.NoError(t, err)
	defer p.Close()
	require.Equal(t, fp, p.Fingerprint)
	require.Equal(t, enc, p.Encoding)
	require.Equal(t, ungrouped, p.Ungrouped)
	require.Len(t, p.Groups, len(groups))
	for i, g := range groups {
		require.Equal(t, g.Key, p.Groups[i].Key)
		got, err := p.Group(i)
		require.NoError(t, err)
		require.Equal(t, g.Data.X, got.X, g.Key)
	}
	s, err := p.Sample([]int{0, 7, d.Rows - 1})
	require.NoError(t, err)
	require.Equal(t, append(append(append([]float32(nil), d.Row(0)...), d.Row(7)...), d.Row(d.Rows-1)...), s.X)
	left, _ := filepath.Glob(filepath.Join(dir, "quern-groups-*"))
	require.Empty(t, left)
}
