package fleet_test

import (
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/quernlab/quern/fleet"
	"github.com/quernlab/quern/model"
	"github.com/stretchr/testify/require"
)

func TestParseShard(t *testing.T) {
	for _, c := range []struct {
		in   string
		want fleet.Shard
		err  string
	}{
		{"0/1", fleet.Shard{0, 1}, ""},
		{" 3 / 8 ", fleet.Shard{3, 8}, ""},
		{"8/8", fleet.Shard{}, "want 0 <= I < N"},
		{"-1/8", fleet.Shard{}, "want 0 <= I < N"},
		{"0/0", fleet.Shard{}, "want 0 <= I < N"},
		{"1", fleet.Shard{}, "want I/N"},
		{"a/b", fleet.Shard{}, "want I/N"},
	} {
		got, err := fleet.ParseShard(c.in)
		if c.err != "" {
			require.ErrorContains(t, err, c.err, c.in)
			continue
		}
		require.NoError(t, err, c.in)
		require.Equal(t, c.want, got)
	}
	// every member belongs to exactly one shard (common practice, no
	// source: round-robin dealing)
	for k := range 50 {
		n := 0
		for i := range 7 {
			if (fleet.Shard{i, 7}).Owns(k) {
				n++
			}
		}
		require.Equal(t, 1, n)
	}
}

func TestFileNameAndSeed(t *testing.T) {
	require.True(t, strings.HasPrefix(fleet.FileName("pump 7/b"), "g-pump_7_b-"))
	require.NotEqual(t, fleet.FileName("a/b"), fleet.FileName("a b"), "names differing in replaced characters share a file")
	long := fleet.FileName(strings.Repeat("x", 500))
	require.LessOrEqual(t, len(long), 2+40+1+16+3)
	require.NotContains(t, fleet.FileName("../../etc"), "/")
	require.Equal(t, fleet.SeedFor(1, "a"), fleet.SeedFor(1, "a"))
	require.NotEqual(t, fleet.SeedFor(1, "a"), fleet.SeedFor(1, "b"))
	require.NotEqual(t, fleet.SeedFor(1, "a"), fleet.SeedFor(2, "a"))
}

func TestPlan(t *testing.T) {
	members, fallback, err := fleet.Plan(map[string]int{"b": 10, "a": 200, "c": 100}, 100)
	require.NoError(t, err)
	require.Equal(t, []string{"a", "c"}, members)
	require.Equal(t, []fleet.Fallback{{Group: "b", Rows: 10}}, fallback)
}

func header() fleet.Index {
	return fleet.Index{Format: fleet.FormatName, Version: fleet.Version, GroupColumn: "site", Kind: "ae", Seed: 1, MinRows: 10}
}

func member(g string) fleet.Member {
	return fleet.Member{Group: g, File: fleet.FileName(g), SHA256: "x"}
}

func TestMerge(t *testing.T) {
	part := func(i, n, groups int, ms ...string) fleet.Part {
		p := fleet.Part{Shard: fleet.Shard{i, n}, Groups: groups, Index: header()}
		for _, m := range ms {
			p.Index.Members = append(p.Index.Members, member(m))
		}
		return p
	}
	ix, err := fleet.Merge([]fleet.Part{part(1, 2, 3, "b"), part(0, 2, 3, "a", "c")})
	require.NoError(t, err)
	require.Equal(t, []string{"a", "b", "c"}, []string{ix.Members[0].Group, ix.Members[1].Group, ix.Members[2].Group})
	// the same part twice is one part
	_, err = fleet.Merge([]fleet.Part{part(1, 2, 3, "b"), part(0, 2, 3, "a", "c"), part(1, 2, 3, "b")})
	require.NoError(t, err)
	for _, c := range []struct {
		parts []fleet.Part
		want  string
	}{
		{nil, "no parts"},
		{[]fleet.Part{part(0, 2, 3, "a", "c")}, "no part of shard 1 (counting from 0, of 2)"},
		{[]fleet.Part{part(0, 2, 3, "a", "c"), part(1, 3, 3, "b")}, "parts of 2 and of 3 shards"},
		{[]fleet.Part{part(0, 2, 3, "a", "c"), part(1, 2, 3, "c")}, `group "c" was trained by two shards`},
		{[]fleet.Part{part(0, 2, 3, "a", "c"), part(1, 2, 3, "b"), part(1, 2, 3, "d")}, "two different parts for shard 1/2"},
		{[]fleet.Part{part(0, 2, 4, "a", "c"), part(1, 2, 4, "b")}, "the parts hold 3 members, the run planned 4"},
		{[]fleet.Part{part(0, 2, 3, "a", "c"), func() fleet.Part { p := part(1, 2, 3, "b"); p.Index.Seed = 2; return p }()}, "trained on other data or settings than shard 0/2: the seed (2, against 1)"},
	} {
		_, err := fleet.Merge(c.parts)
		require.ErrorIs(t, err, fleet.ErrFleet)
		require.ErrorContains(t, err, c.want)
	}
}

// writeFleet writes a fleet of tiny autoencoders, one per group, and a
// shared model, into dir.
func writeFleet(t *testing.T, dir string, groups []string, seed uint64) {
	t.Helper()
	require.NoError(t, makeFleet(dir, groups, seed))
}

func TestOpenRouteReload(t *testing.T) {
	dir := t.TempDir()
	writeFleet(t, dir, []string{"a", "b"}, 1)
	f, err := fleet.Open(dir)
	require.NoError(t, err)
	require.Equal(t, 2, f.Len())
	a, shared, ok := f.Route("a")
	require.True(t, ok)
	require.False(t, shared)
	require.Equal(t, "a", a.Group)
	other, shared, ok := f.Route("zzz")
	require.True(t, ok)
	require.True(t, shared)
	require.Equal(t, f.Shared(), other)
	// rows dealt to their models, each model's rows in order, the
	// models in the order first met
	keys := []string{"b", "zzz", "a", "b", ""}
	batches, none := f.Deal(len(keys), func(i int) string { return keys[i] })
	require.Empty(t, none)
	require.Len(t, batches, 3)
	require.Equal(t, "b", batches[0].Entry.Group)
	require.Equal(t, []int{0, 3}, batches[0].Rows)
	require.True(t, batches[1].Shared)
	require.Equal(t, []int{1, 4}, batches[1].Rows)
	require.Equal(t, []int{2}, batches[2].Rows)

	// routes answer while reloads swap members in
	var wg sync.WaitGroup
	stop := make(chan struct{})
	wg.Add(1)
	go func() {
		defer wg.Done()
		for {
			select {
			case <-stop:
				return
			default:
			}
			e, _, ok := f.Route("b")
			if !ok || e.Value == nil {
				t.Error("a route found no model during a reload")
				return
			}
			_, err := e.Value.(model.Encoder).Encode([]float32{1, 2, 3}, 1)
			if err != nil {
				t.Error(err)
				return
			}
		}
	}()
	// b's model replaced, and the index with it: one member opened again
	writeFleet(t, dir, []string{"a", "b"}, 1)
	r, err := f.Reload("", false)
	require.NoError(t, err)
	require.Equal(t, fleet.Reloaded{Kept: 2}, r, "unchanged files opened again")
	writeFleet(t, dir, []string{"a", "b", "c"}, 2)
	r, err = f.Reload("", false)
	require.NoError(t, err)
	require.Equal(t, fleet.Reloaded{Opened: 3}, r)
	close(stop)
	wg.Wait()

	// a file that does not match the index: the reload is refused and
	// the fleet keeps what it had
	before, _, _ := f.Route("c")
	path := filepath.Join(dir, fleet.FileName("c"))
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	b[len(b)-1] ^= 1
	require.NoError(t, os.WriteFile(path, b, 0o644))
	_, err = f.Reload("c", false)
	require.ErrorIs(t, err, fleet.ErrFleet)
	require.ErrorContains(t, err, "the index says")
	after, _, _ := f.Route("c")
	require.Same(t, before, after)
	_, err = fleet.Open(dir)
	require.ErrorContains(t, err, fleet.FileName("c"))
	// a full reload reads every file: c's no longer matches the index
	_, err = f.Reload("", false)
	require.ErrorContains(t, err, "the index says")

	_, err = fleet.Open(t.TempDir())
	require.ErrorIs(t, err, fleet.ErrFleet)
	require.ErrorContains(t, err, "cannot read")
}
