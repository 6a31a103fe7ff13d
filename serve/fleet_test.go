package serve

import (
	"bytes"
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/fleet"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

// writeFleet writes a fleet by "site" of autoencoders trained on the
// breast-cancer rows with named columns, one seed per member, and a
// shared model when shared; it returns the models' files' scores of
// row 0, per group ("" the shared model).
func writeFleet(t *testing.T, dir string, groups []string, shared bool, seed uint64) map[string]float64 {
	t.Helper()
	cp := *breastCancer(t)
	d := &cp
	d.Columns = make([]string, 30)
	for j := range d.Columns {
		d.Columns[j] = fmt.Sprintf("f%02d", j)
	}
	ix := fleet.Index{Format: fleet.FormatName, Version: fleet.Version, GroupColumn: "site", Kind: "ae", Seed: seed, MinRows: 10, Members: []fleet.Member{}}
	scores := map[string]float64{}
	put := func(group, file string) fleet.Member {
		m, err := ae.New(ae.Config{Inputs: 30, Hidden: []int{8}, Latent: 3, Seed: fleet.SeedFor(seed, group)})
		require.NoError(t, err)
		trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 1})
		_, err = m.Calibrate(d.X, d.Rows, anomaly.Config{FalseAlarm: 0.05})
		require.NoError(t, err)
		sc, err := m.RowScores(d.X[:30], 1)
		require.NoError(t, err)
		scores[group] = sc[0]
		path := filepath.Join(dir, file)
		require.NoError(t, m.Save(path, nil))
		b, err := os.ReadFile(path)
		require.NoError(t, err)
		return fleet.Member{Group: group, File: file, SHA256: fleet.Hash(b), Rows: d.Rows}
	}
	for _, g := range groups {
		ix.Members = append(ix.Members, put(g, fleet.FileName(g)))
	}
	if shared {
		m := put("", fleet.SharedFile)
		ix.Shared = &m
	}
	require.NoError(t, fleet.WriteIndex(dir, &ix))
	return scores
}

func record(site any, from int) map[string]any {
	d := bcData
	rec := map[string]any{"site": site}
	for j := 0; j < 30; j++ {
		rec[fmt.Sprintf("f%02d", j)] = d.X[from*30+j]
	}
	return rec
}

// A fleet's server scores each record with its group's model (checked
// against the model files' own scores), unknown groups with the shared
// model, says which, and takes the group from the path too.
func TestFleetRouting(t *testing.T) {
	dir := t.TempDir()
	want := writeFleet(t, dir, []string{"1234567", "north", "south/2"}, true, 1)
	l := start(t, Config{FleetPath: dir})
	c := &http.Client{Timeout: 5 * time.Second}
	body, _ := json.Marshal(map[string]any{"records": []any{record("south/2", 0), record("elsewhere", 0), record("north", 0), record(7, 0)}})
	code, v := post(t, c, l.url+"/v1/score", body)
	require.Equal(t, 200, code, "%v", v)
	res := v["results"].([]any)
	require.Len(t, res, 4)
	for i, g := range []string{"south/2", "", "north", ""} {
		require.InDelta(t, want[g], res[i].(map[string]any)["score"].(float64), 1e-9*want[g], "record %d", i+1)
	}
	require.Equal(t, []any{"own", "shared", "own", "shared"}, v["routed"])
	// a group named by a number is the number as written, as in the
	// training file's text (not 1.234567e+06)
	numeric, _ := json.Marshal(map[string]any{"records": []any{record(json.RawMessage("1234567"), 0), record(" north ", 0)}})
	code, v = post(t, c, l.url+"/v1/score", numeric)
	require.Equal(t, 200, code, "%v", v)
	require.Equal(t, []any{"own", "own"}, v["routed"])
	require.InDelta(t, want["1234567"], v["results"].([]any)[0].(map[string]any)["score"].(float64), 1e-9*want["1234567"])
	require.Contains(t, v["caution"], "decision aid")

	// the group in the path: escaped, as a client must send a slash
	code, v = post(t, c, l.url+"/v1/groups/south%2F2/score", rowsBody(bcData, 0, 1))
	require.Equal(t, 200, code, "%v", v)
	require.Equal(t, "own", v["routed"])
	require.InDelta(t, want["south/2"], v["results"].([]any)[0].(map[string]any)["score"].(float64), 1e-9*want["south/2"])
	code, v = post(t, c, l.url+"/v1/groups/Sout/score", rowsBody(bcData, 0, 1))
	require.Equal(t, 200, code, "%v", v)
	require.Equal(t, "shared", v["routed"], "a group with no model of its own, named in the path, is not said to be scored by the shared model")
	code, v = post(t, c, l.url+"/v1/groups/north/encode", rowsBody(bcData, 0, 2))
	require.Equal(t, 200, code, "%v", v)
	require.Len(t, v["codes"], 2)
	code, v = post(t, c, l.url+"/v1/encode", body)
	require.Equal(t, 200, code, "%v", v)
	require.Len(t, v["codes"], 4)

	for _, bad := range []struct {
		url, body string
		code      int
		want      string
	}{
		{"/v1/score", `{"rows":[[1,2]]}`, 400, `a fleet routes each record by its "site"`},
		{"/v1/score", `{"records":[{"f00":1}]}`, 400, `record 1 has no "site"`},
		{"/v1/score", `{"records":[{"site":"north","f00":1}]}`, 400, `record 1 has no "f01"`},
		{"/v1/score", `{"records":[{"site":[1]}]}`, 400, `record 1: "site" is [1]`},
		{"/v1/reconstruct", `{}`, 400, "POST /v1/groups/{site}/reconstruct"},
		{"/v1/groups/north/explode", `{}`, 404, "a group's routes are score, encode, reconstruct and sample"},
		{"/v1/groups/north/score", `{"records":[{"site":"south/2","f00":1}]}`, 400, `record 1 has site "south/2", but the path names "north"`},
	} {
		code, v := post(t, c, l.url+bad.url, []byte(bad.body))
		require.Equal(t, bad.code, code, "%s %s: %v", bad.url, bad.body, v)
		require.Contains(t, v["error"], bad.want)
	}
	// a record's number in a message is its place in the request
	two := map[string]any{"records": []any{record("north", 0), map[string]any{"site": "south/2"}}}
	body, _ = json.Marshal(two)
	code, v = post(t, c, l.url+"/v1/score", body)
	require.Equal(t, 400, code)
	require.Contains(t, v["error"], "record 2 has no")

	resp, err := c.Get(l.url + "/metrics")
	require.NoError(t, err)
	var b strings.Builder
	_, err = fmt.Fprint(&b, readAll(t, resp))
	require.NoError(t, err)
	// records routed by column (2 + 2 + 2 own, 2 + 2 shared), requests
	// by path (2 own, 1 shared); nothing of the refused requests
	require.Contains(t, b.String(), `quern_fleet_routed_total{to="own"} 8`)
	require.Contains(t, b.String(), `quern_fleet_routed_total{to="shared"} 5`)
	require.Contains(t, b.String(), "quern_fleet_models 3")
	require.NotContains(t, b.String(), "north", "a metric label names a group")
}

func readAll(t *testing.T, resp *http.Response) string {
	t.Helper()
	defer resp.Body.Close()
	var b strings.Builder
	buf := make([]byte, 4096)
	for {
		n, err := resp.Body.Read(buf)
		b.Write(buf[:n])
		if err != nil {
			break
		}
	}
	return b.String()
}

// Without a shared model a group with no model of its own is a 404 that
// names it, never an answer from another group's model.
func TestFleetWithoutSharedRefuses(t *testing.T) {
	dir := t.TempDir()
	writeFleet(t, dir, []string{"north"}, false, 1)
	l := start(t, Config{FleetPath: dir})
	c := &http.Client{Timeout: 5 * time.Second}
	body, _ := json.Marshal(map[string]any{"records": []any{record("north", 0), record("nowhere", 1)}})
	code, v := post(t, c, l.url+"/v1/score", body)
	require.Equal(t, 404, code)
	require.Contains(t, v["error"], `no model for site "nowhere" (record 2)`)
	code, v = post(t, c, l.url+"/v1/groups/nowhere/score", rowsBody(bcData, 0, 1))
	require.Equal(t, 404, code)
	require.Contains(t, v["error"], `no model for site "nowhere"`)
}

// Reloading one member, or the fleet, while requests run loses none of
// them; a member whose file does not match the index is refused and the
// fleet keeps serving what it had.
func TestFleetReloadUnderLoad(t *testing.T) {
	dir := t.TempDir()
	writeFleet(t, dir, []string{"north", "south"}, true, 1)
	l := start(t, Config{FleetPath: dir})
	c := &http.Client{Timeout: 10 * time.Second}
	body, _ := json.Marshal(map[string]any{"records": []any{record("north", 0), record("south", 1), record("other", 2)}})
	stop := make(chan struct{})
	var wg sync.WaitGroup
	errs := make(chan string, 100)
	for range 8 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				select {
				case <-stop:
					return
				default:
				}
				resp, err := c.Post(l.url+"/v1/score", "application/json", bytes.NewReader(body))
				if err != nil {
					errs <- err.Error()
					return
				}
				text := readAll(t, resp)
				if resp.StatusCode != 200 {
					errs <- fmt.Sprintf("%d %s", resp.StatusCode, text)
					return
				}
			}
		}()
	}
	writeFleet(t, dir, []string{"north", "south"}, true, 2) // every file new
	code, v := post(t, c, l.url+"/admin/reload?group=north", nil)
	require.Equal(t, 200, code, "%v", v)
	require.Equal(t, 1.0, v["opened"])
	code, v = post(t, c, l.url+"/admin/reload", nil)
	require.Equal(t, 200, code, "%v", v)
	require.Equal(t, 1.0, v["opened"]) // south: north is already the index's
	require.Equal(t, 1.0, v["kept"])
	close(stop)
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Error(e)
	}
	path := filepath.Join(dir, fleet.FileName("south"))
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	b[len(b)-1] ^= 1
	require.NoError(t, os.WriteFile(path, b, 0o644))
	for _, q := range []string{"?foo=1", "?group=north&shared=true", "?shared=maybe", "?group="} {
		code, _ = post(t, c, l.url+"/admin/reload"+q, nil)
		require.Equal(t, 400, code, q)
	}
	code, v = post(t, c, l.url+"/admin/reload?group=south", nil)
	require.Equal(t, 422, code)
	require.Contains(t, v["error"], "the index says")
	code, _ = post(t, c, l.url+"/v1/score", body)
	require.Equal(t, 200, code)
}
