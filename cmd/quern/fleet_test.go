package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/fleet"
	"github.com/stretchr/testify/require"
)

// writeFleetCSV writes an invented table of sites: a site column, a
// reading counter, three sensors whose level and spread differ by site,
// and a text category; sizes gives each site's rows, in the order the
// sites' rows are interleaved; a site named "" writes empty site cells.
func writeFleetCSV(t *testing.T, path string, sizes map[string]int, seed uint64) {
	t.Helper()
	rng := rand.New(rand.NewPCG(seed, 9))
	names := make([]string, 0, len(sizes))
	for n := range sizes {
		names = append(names, n)
	}
	slices.Sort(names)
	left := map[string]int{}
	for n, k := range sizes {
		left[n] = k
	}
	var b bytes.Buffer
	b.WriteString("site,reading,temp,pressure,flow,mode\n")
	for r := 0; ; r++ {
		any := false
		for i, n := range names {
			if left[n] == 0 {
				continue
			}
			any = true
			left[n]--
			base := float64(i + 1)
			mode := []string{"eco", "boost", "idle"}[rng.IntN(3)]
			fmt.Fprintf(&b, "%s,%d,%.4f,%.4f,%.4f,%s\n", n, r, 20+base+rng.NormFloat64()*base/4, 100*base+3*rng.NormFloat64(), base*rng.Float64(), mode)
		}
		if !any {
			break
		}
	}
	require.NoError(t, os.WriteFile(path, b.Bytes(), 0o644))
}

// fleetFiles reads every file of a fleet folder except the shards' parts.
func fleetFiles(t *testing.T, dir string) map[string][]byte {
	t.Helper()
	ents, err := os.ReadDir(dir)
	require.NoError(t, err)
	out := map[string][]byte{}
	for _, e := range ents {
		if strings.HasPrefix(e.Name(), "part-") {
			continue
		}
		b, err := os.ReadFile(filepath.Join(dir, e.Name()))
		require.NoError(t, err)
		out[e.Name()] = b
	}
	return out
}

var fleetArgs = []string{"train", "-data", "sites.csv", "-group", "site", "-epochs", "4", "-hidden", "6", "-latent", "2", "-folds", "0", "-val", "0.2", "-seed", "5", "-shared", "300", "-min-rows", "60", "-quiet"}

// A fleet trained by four shards, each its own process with its own
// folder as on four machines, and merged equals the fleet one process
// trains, file for file and bit for bit; a shard run again writes the
// same files; at 1 and 2 threads the fleet is the same.
func TestFleetShardsMergeBitwise(t *testing.T) {
	dir := t.TempDir()
	writeFleetCSV(t, filepath.Join(dir, "sites.csv"), map[string]int{"north": 150, "south": 120, "east": 90, "west": 200, "harbour": 70, "depot 7/b": 80, "kiosk": 20, "": 15}, 1)
	r := ok(t, quern(t, dir, []string{"GOMAXPROCS=2"}, append(fleetArgs[:len(fleetArgs)-1:len(fleetArgs)-1], "-out", "single")...))
	for _, s := range []string{"wrote the fleet single/fleet.json: 6 models, one per site, each an autoencoder (ae), and a shared model on 300 rows drawn from all groups",
		"rows per model: lowest 70 (site harbour), median 105, highest 200 (site west)",
		"1 group with fewer than 60 rows (-min-rows), scored by the shared model: kiosk (20)",
		"15 rows with an empty site", "validation loss per model: lowest", "threshold per model: lowest", "decision aid"} {
		require.Contains(t, r.stderr, s)
	}
	single := fleetFiles(t, filepath.Join(dir, "single"))
	require.Len(t, single, 8) // the index, six members, the shared model
	require.Contains(t, single, fleet.FileName("depot 7/b"))

	// a model file an earlier fleet left in the folder goes
	stale := filepath.Join(dir, "one-thread", "g-gone-0123456789abcdef.qm")
	require.NoError(t, os.MkdirAll(filepath.Dir(stale), 0o755))
	require.NoError(t, os.WriteFile(stale, []byte("x"), 0o644))
	r = ok(t, quern(t, dir, []string{"GOMAXPROCS=1"}, append(fleetArgs, "-out", "one-thread")...))
	require.Contains(t, r.stderr, "removed 1 model file an earlier fleet left in one-thread")
	require.Equal(t, single, fleetFiles(t, filepath.Join(dir, "one-thread")), "a fleet trained at 1 thread differs from one at 2")

	var wg sync.WaitGroup
	res := make([]result, 4)
	for i := range 4 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			args := append(fleetArgs, "-out", fmt.Sprintf("shard%d", i), "-shard", fmt.Sprintf("%d/4", i))
			if i == 3 {
				// the data named another way, and a default given: the
				// same run
				args = slices.Replace(slices.Clone(args), 2, 3, "./sites.csv")
				args = append(args, "-batch", "64")
			}
			res[i] = quern(t, dir, []string{"GOMAXPROCS=1"}, args...)
		}()
	}
	wg.Wait()
	for _, r := range res {
		ok(t, r)
	}
	r = quern(t, dir, nil, "merge", "-out", "merged", "shard0", "shard1", "shard2")
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, "no part of shard 3 (counting from 0, of 4)")
	_, err := os.Stat(filepath.Join(dir, "merged", fleet.IndexFile))
	require.True(t, os.IsNotExist(err), "a failed merge wrote an index")

	part2, err := os.ReadFile(filepath.Join(dir, "shard2", "part-2-of-4.json"))
	require.NoError(t, err)
	before := fleetFiles(t, filepath.Join(dir, "shard2"))
	ok(t, quern(t, dir, []string{"GOMAXPROCS=2"}, append(fleetArgs, "-out", "shard2", "-shard", "2/4")...))
	again, err := os.ReadFile(filepath.Join(dir, "shard2", "part-2-of-4.json"))
	require.NoError(t, err)
	require.Equal(t, part2, again, "a shard run again wrote another part")
	require.Equal(t, before, fleetFiles(t, filepath.Join(dir, "shard2")))

	r = ok(t, quern(t, dir, nil, "merge", "-out", "merged", "shard0", "shard1", "shard2", "shard3"))
	require.Contains(t, r.stderr, "6 models by site from 4 shards")
	merged := fleetFiles(t, filepath.Join(dir, "merged"))
	require.Equal(t, len(single), len(merged))
	for name, b := range single {
		require.True(t, bytes.Equal(b, merged[name]), "%s differs between the single run and the merged shards", name)
	}
	// merging into one of the shards' own folders copies the rest there
	ok(t, quern(t, dir, nil, "merge", "-out", "shard0", "shard0", "shard1", "shard2", "shard3"))
	require.Equal(t, single, fleetFiles(t, filepath.Join(dir, "shard0")))

	// a model file changed after its shard ran is refused by name
	own, err := filepath.Glob(filepath.Join(dir, "shard1", "g-*.qm"))
	require.NoError(t, err)
	require.NotEmpty(t, own)
	f := own[0]
	fb, err := os.ReadFile(f)
	require.NoError(t, err)
	fb[len(fb)-1] ^= 1
	require.NoError(t, os.WriteFile(f, fb, 0o644))
	r = quern(t, dir, nil, "merge", "-out", "merged2", "shard0", "shard1", "shard2", "shard3")
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, "changed since the shard ran")

	// scoring with the fleet: each row by its group's model, as the
	// member's own file scores it; small and empty groups by the shared
	// model
	ok(t, quern(t, dir, nil, "score", "-fleet", "single", "-data", "sites.csv", "-keep", "reading", "-out", "fleet-scores.csv", "-quiet"))
	fsc, err := data.LoadCSV(filepath.Join(dir, "fleet-scores.csv"), data.CSVConfig{Columns: []string{"score"}, Keep: []string{"site", "model"}})
	require.NoError(t, err)
	require.Equal(t, 745, fsc.Rows)
	var north []float32
	for i := range fsc.Rows {
		site, route := fsc.Kept[2*i], fsc.Kept[2*i+1]
		switch site {
		case "kiosk", "":
			require.Equal(t, "shared", route, "row %d", i+1)
		default:
			require.Equal(t, "own", route, "row %d", i+1)
		}
		if site == "north" {
			north = append(north, fsc.X[i])
		}
	}
	whole, err := os.ReadFile(filepath.Join(dir, "sites.csv"))
	require.NoError(t, err)
	var nb bytes.Buffer
	for k, line := range strings.Split(strings.TrimSpace(string(whole)), "\n") {
		if k == 0 || strings.HasPrefix(line, "north,") {
			nb.WriteString(line + "\n")
		}
	}
	require.NoError(t, os.WriteFile(filepath.Join(dir, "north.csv"), nb.Bytes(), 0o644))
	ok(t, quern(t, dir, nil, "score", "-model", filepath.Join("single", fleet.FileName("north")), "-data", "north.csv", "-out", "north-scores.csv", "-quiet"))
	nsc, err := data.LoadCSV(filepath.Join(dir, "north-scores.csv"), data.CSVConfig{Columns: []string{"score"}})
	require.NoError(t, err)
	require.Equal(t, nsc.X, north, "the fleet scored north's rows otherwise than north's model")

	// the index says what a reader needs
	var ix fleet.Index
	require.NoError(t, json.Unmarshal(single[fleet.IndexFile], &ix))
	require.Equal(t, "site", ix.GroupColumn)
	require.Equal(t, []fleet.Fallback{{Group: "kiosk", Rows: 20}}, ix.Fallback)
	require.Equal(t, 15, ix.Ungrouped)
	require.Equal(t, 745, ix.Data.Rows)
	require.Equal(t, 300, ix.Shared.Rows)
	for _, m := range ix.Members {
		require.NotNil(t, m.Threshold, m.Group)
		require.NotNil(t, m.ValidationLoss, m.Group)
		require.Equal(t, 4, m.Epochs)
	}
}

// A fleet trained from the file regrouped on disk (-stream) is the
// fleet trained in memory, file for file, bit for bit; the index names
// no flag that changes no model (-stream, -cache).
func TestFleetStreamed(t *testing.T) {
	dir := t.TempDir()
	writeFleetCSV(t, filepath.Join(dir, "sites.csv"), map[string]int{"north": 150, "south": 120, "east": 90, "kiosk": 20, "": 15}, 6)
	args := []string{"train", "-data", "sites.csv", "-group", "site", "-columns", "temp,pressure,flow", "-epochs", "3", "-hidden", "6", "-latent", "2", "-folds", "0", "-seed", "2", "-shared", "200", "-min-rows", "60", "-quiet"}
	ok(t, quern(t, dir, nil, append(args, "-out", "mem")...))
	ok(t, quern(t, dir, []string{"GOMAXPROCS=1"}, append(args, "-stream", "-cache", dir, "-out", "str")...))
	mem, str := fleetFiles(t, filepath.Join(dir, "mem")), fleetFiles(t, filepath.Join(dir, "str"))
	require.Len(t, mem, 5) // the index, three members, the shared model
	require.Equal(t, len(mem), len(str))
	for name, b := range mem {
		require.True(t, bytes.Equal(b, str[name]), "%s differs between the fleet trained in memory and the streamed one", name)
	}
	left, _ := filepath.Glob(filepath.Join(dir, "quern-groups-*"))
	require.Empty(t, left, "the regrouped rows outlived the run")
	r := quern(t, dir, nil, append(args, "-stream", "-cache", "none", "-out", "x")...)
	require.Equal(t, 2, r.code)
	require.Contains(t, r.stderr, "-cache none with -group")
	r = quern(t, dir, nil, "train", "-data", "sites.csv", "-group", "site", "-stream", "-out", "y", "-quiet")
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, `column 6 (mode): "`)
}

// A re-train that fails leaves the fleet already in the folder as it
// was: the members train in a staging folder and take their places only
// when every one is done.
func TestFleetFailedRetrainKeepsFleet(t *testing.T) {
	dir := t.TempDir()
	writeFleetCSV(t, filepath.Join(dir, "sites.csv"), map[string]int{"north": 150, "south": 120}, 7)
	args := []string{"train", "-data", "sites.csv", "-group", "site", "-columns", "temp,pressure,flow", "-epochs", "2", "-folds", "0", "-out", "fleet", "-quiet"}
	ok(t, quern(t, dir, nil, args...))
	before := fleetFiles(t, filepath.Join(dir, "fleet"))
	// a learning rate that sends every loss to infinity
	r := quern(t, dir, nil, append(args, "-rate", "1e30", "-seed", "9")...)
	require.Equal(t, 1, r.code, r.stderr)
	require.Contains(t, r.stderr, "non-finite")
	require.Equal(t, before, fleetFiles(t, filepath.Join(dir, "fleet")), "a failed re-train changed the fleet in the folder")
	left, _ := filepath.Glob(filepath.Join(dir, "fleet", ".training-*"))
	require.Empty(t, left, "the staging folder was left")
}

func TestFleetBadFlags(t *testing.T) {
	dir := t.TempDir()
	writeFleetCSV(t, filepath.Join(dir, "sites.csv"), map[string]int{"a": 30, "b": 30}, 2)
	require.NoError(t, os.WriteFile(filepath.Join(dir, "afile"), []byte("x"), 0o644))
	for _, c := range []struct {
		args []string
		code int
		want string
	}{
		{[]string{"-group", "site", "-out", "f", "-every", "2"}, 2, "-every is not for fleets"},
		{[]string{"-group", "site", "-out", "f", "-shard", "4/4"}, 2, "-shard 4/4: want 0 <= I < N"},
		{[]string{"-group", "site", "-out", "f", "-shard", "x"}, 2, `-shard "x": want I/N`},
		{[]string{"-group", "site", "-out", "f", "-min-rows", "1"}, 2, "-min-rows 1: want at least 2"},
		{[]string{"-group", "site", "-out", "afile"}, 2, "-out afile is a file; with -group it names the fleet's folder"},
		{[]string{"-group", "site", "-out", "f", "-columns", "temp,site"}, 2, "-group site is also in -columns"},
		{[]string{"-out", "m.qm", "-shard", "0/2"}, 2, "-min-rows, -shared and -shard are for fleets"},
		{[]string{"-group", "nosuch", "-out", "f"}, 2, "-group nosuch: sites.csv has no such column (its columns: site, reading, temp, pressure, flow, mode)"},
		{[]string{"-group", "site", "-out", "f", "-shared", "0"}, 1, "no group of site has 100 rows or more (-min-rows), and -shared 0 asks for no shared model: nothing to train"},
	} {
		r := quern(t, dir, nil, append([]string{"train", "-data", "sites.csv", "-quiet"}, c.args...)...)
		require.Equal(t, c.code, r.code, "%v: %s", c.args, r.stderr)
		require.Contains(t, r.stderr, c.want, "%v", c.args)
		require.Equal(t, 1, strings.Count(strings.TrimSpace(r.stderr), "\n")+1, "%v: more than one line: %s", c.args, r.stderr)
	}
	_, err := os.Stat(filepath.Join(dir, "f"))
	require.True(t, os.IsNotExist(err), "a run that failed left its -out folder")
	// a fleet without a shared model: a group it has no model for is
	// flagged unscorable, never scored by another group's model
	writeFleetCSV(t, filepath.Join(dir, "big.csv"), map[string]int{"a": 120, "b": 120}, 3)
	ok(t, quern(t, dir, nil, "train", "-data", "big.csv", "-group", "site", "-shared", "0", "-epochs", "2", "-folds", "0", "-out", "noshared", "-quiet"))
	writeFleetCSV(t, filepath.Join(dir, "newsite.csv"), map[string]int{"a": 3, "zz": 2}, 4)
	r := ok(t, quern(t, dir, nil, "score", "-fleet", "noshared", "-data", "newsite.csv", "-out", "ns.csv"))
	require.Contains(t, r.stderr, "2 with no model: flagged, unscored")
	ns, err := os.ReadFile(filepath.Join(dir, "ns.csv"))
	require.NoError(t, err)
	require.Equal(t, 2, strings.Count(string(ns), `unscorable: no model for site ""zz""`))
	r = quern(t, dir, nil, "merge", "-out", "f2")
	require.Equal(t, 2, r.code)
	r = quern(t, dir, nil, "merge", "-out", "f2", dir)
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, "holds no part-I-of-N.json: not the folder of a shard")
	r = quern(t, dir, nil, "merge", "-out", "f2", "sites.csv")
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, "sites.csv: not a folder")
	_, err = os.Stat(filepath.Join(dir, "f2"))
	require.True(t, os.IsNotExist(err), "a merge that failed left its -out folder")
}

// Floyd's sample: n distinct places of N, sorted, the same for a seed.
func TestSampleRows(t *testing.T) {
	for _, c := range [][2]int{{10, 10}, {1000, 7}, {5, 0}, {100000, 2000}} {
		got := sampleRows(rand.New(rand.NewPCG(1, 2)), c[0], c[1])
		require.Len(t, got, c[1])
		require.True(t, slices.IsSorted(got))
		require.Equal(t, len(got), len(slices.Compact(slices.Clone(got))), "repeated places")
		if len(got) > 0 {
			require.Less(t, got[len(got)-1], c[0])
		}
		require.Equal(t, got, sampleRows(rand.New(rand.NewPCG(1, 2)), c[0], c[1]))
	}
}
