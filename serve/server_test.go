package serve

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/trainenv"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
	"github.com/stretchr/testify/require"
)

var bcData *data.Dataset

func breastCancer(t testing.TB) *data.Dataset {
	if bcData == nil {
		d, err := data.LoadCSV("../testdata/sklearn/breast_cancer.csv", data.CSVConfig{NoHeader: true, SkipLines: 1, Label: "c30"})
		require.NoError(t, err)
		bcData = d
	}
	return bcData
}

func writeAE(t testing.TB, path string, seed uint64) {
	d := breastCancer(t)
	m, err := ae.New(ae.Config{Inputs: 30, Hidden: []int{16}, Latent: 4, Seed: seed})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 2})
	_, err = m.Calibrate(d.X, d.Rows, anomaly.Config{FalseAlarm: 0.05})
	require.NoError(t, err)
	require.NoError(t, m.Save(path, nil))
}

type live struct {
	s      *Server
	url    string
	cancel context.CancelFunc
	done   chan error
}

func start(t testing.TB, cfg Config) *live {
	if cfg.DrainDelay == 0 {
		cfg.DrainDelay = -1 // the tests stop at once; TestDrainingClosesConnections drains
	}
	s, err := New(cfg)
	require.NoError(t, err)
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	ctx, cancel := context.WithCancel(context.Background())
	l := &live{s: s, url: "http://" + ln.Addr().String(), cancel: cancel, done: make(chan error, 1)}
	go func() { l.done <- s.Serve(ctx, ln) }()
	t.Cleanup(func() {
		cancel()
		<-l.done
	})
	return l
}

func rowsBody(d *data.Dataset, from, n int) []byte {
	var b bytes.Buffer
	b.WriteString(`{"rows":[`)
	for i := 0; i < n; i++ {
		if i > 0 {
			b.WriteByte(',')
		}
		b.WriteByte('[')
		for j, v := range d.Row(from + i) {
			if j > 0 {
				b.WriteByte(',')
			}
			fmt.Fprintf(&b, "%g", v)
		}
		b.WriteByte(']')
	}
	b.WriteString(`]}`)
	return b.Bytes()
}

func post(t testing.TB, c *http.Client, url string, body []byte) (int, map[string]any) {
	resp, err := c.Post(url, "application/json", bytes.NewReader(body))
	require.NoError(t, err)
	defer resp.Body.Close()
	var v map[string]any
	require.NoError(t, json.NewDecoder(resp.Body).Decode(&v), "status %d", resp.StatusCode)
	return resp.StatusCode, v
}

// A bounded load test over loopback: 64 goroutines, 3200 single-row score
// requests, a 60-second cap, zero errors; p99 is logged. A reload of a new
// model file in the middle loses no request.
func TestLoadWithReload(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "m.qm")
	writeAE(t, path, 1)
	l := start(t, Config{ModelPath: path})
	d := breastCancer(t)
	c := &http.Client{Timeout: 10 * time.Second}
	const workers, each = 64, 50
	var mu sync.Mutex
	var lat []time.Duration
	errs := make(chan error, workers*each)
	deadline := time.Now().Add(60 * time.Second)
	var wg sync.WaitGroup
	reloaded := make(chan struct{})
	go func() {
		defer close(reloaded)
		time.Sleep(20 * time.Millisecond)
		writeAE(t, path+".new", 2)
		require.NoError(t, os.Rename(path+".new", path))
		code, v := post(t, c, l.url+"/admin/reload", nil)
		if code != 200 {
			errs <- fmt.Errorf("reload: %d %v", code, v)
		}
	}()
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			for i := 0; i < each && time.Now().Before(deadline); i++ {
				body := rowsBody(d, (w*each+i)%d.Rows, 1)
				t0 := time.Now()
				resp, err := c.Post(l.url+"/v1/score", "application/json", bytes.NewReader(body))
				if err != nil {
					errs <- err
					continue
				}
				var v scoreResponse
				err = json.NewDecoder(resp.Body).Decode(&v)
				resp.Body.Close()
				if err != nil || resp.StatusCode != 200 || len(v.Results) != 1 {
					errs <- fmt.Errorf("status %d, %v", resp.StatusCode, err)
					continue
				}
				mu.Lock()
				lat = append(lat, time.Since(t0))
				mu.Unlock()
			}
		}(w)
	}
	wg.Wait()
	<-reloaded
	close(errs)
	for err := range errs {
		t.Error(err)
	}
	sort.Slice(lat, func(a, b int) bool { return lat[a] < lat[b] })
	require.Len(t, lat, workers*each)
	t.Logf("%d requests, p50 %v, p99 %v", len(lat), lat[len(lat)/2], lat[len(lat)*99/100])
	require.Equal(t, uint64(1), l.s.m.reloads.Load())
}

func TestBadRequestsGet4xxAndServerKeepsServing(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "m.qm")
	writeAE(t, path, 1)
	l := start(t, Config{ModelPath: path, MaxBodyBytes: 4096, MaxRows: 5})
	c := &http.Client{Timeout: 5 * time.Second}
	d := breastCancer(t)
	big := bytes.Repeat([]byte(" "), 5000)
	cases := []struct {
		name, method, path string
		body               []byte
		code               int
		want               string
	}{
		{"malformed", "POST", "/v1/score", []byte(`{"rows": [[1,2`), 400, "malformed JSON"},
		{"columns", "POST", "/v1/score", []byte(`{"rows": [[1,2,3]]}`), 400, "row 1 has 3 columns, the model takes 30"},
		{"nan", "POST", "/v1/score", []byte(`{"rows": [[NaN]]}`), 400, "malformed JSON"},
		{"null", "POST", "/v1/score", []byte(`{"rows": [[` + strings.Repeat("1,", 29) + `null]]}`), 400, "row 1 column 30 is null"},
		{"overflow", "POST", "/v1/score", []byte(`{"rows": [[` + strings.Repeat("1,", 29) + `1e39]]}`), 400, "float32 range"},
		{"unknown field", "POST", "/v1/score", []byte(`{"rowz": []}`), 400, "unknown field"},
		{"oversized", "POST", "/v1/score", append([]byte(`{"rows":`), big...), 413, "over 4096 bytes"},
		{"too many rows", "POST", "/v1/score", rowsBody(d, 0, 6), 413, "6 rows, the limit is 5"},
		{"unknown route", "GET", "/v2/nothing", nil, 404, "no route"},
		{"wrong method", "GET", "/v1/score", nil, 405, "use POST"},
		{"wrong kind", "POST", "/v1/sample", []byte(`{"count": 2, "seed": 1}`), 422, "a VAE or a GAN"},
		{"text cell", "POST", "/v1/score", []byte(`{"rows": [["a"]]}`), 400, `field "rows" takes an array of rows, each an array of numbers; got a JSON string at byte 14`},
		{"rows not an array", "POST", "/v1/score", []byte(`{"rows": "x"}`), 400, `field "rows" takes an array of rows`},
		{"top not a number", "POST", "/v1/score", []byte(`{"rows": [], "top": "x"}`), 400, `field "top" takes a whole number`},
		{"empty body", "POST", "/v1/score", nil, 400, "the request body is empty"},
		{"array body", "POST", "/v1/score", []byte(`[1]`), 400, "the request body must be a JSON object, not a JSON array"},
		{"syntax", "POST", "/v1/score", []byte(`nope`), 400, "malformed JSON at byte 2"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			req, _ := http.NewRequest(tc.method, l.url+tc.path, bytes.NewReader(tc.body))
			resp, err := c.Do(req)
			require.NoError(t, err)
			defer resp.Body.Close()
			require.Equal(t, tc.code, resp.StatusCode)
			require.Equal(t, "application/json", resp.Header.Get("Content-Type"))
			var e errorBody
			require.NoError(t, json.NewDecoder(resp.Body).Decode(&e))
			require.Contains(t, e.Error, tc.want)
			for _, goWord := range []string{"Go struct", "Go value", "rowsRequest", "[]*float64", "json: "} {
				require.NotContains(t, e.Error, goWord, "no Go identifiers in the API's messages")
			}
		})
	}
	code, v := post(t, c, l.url+"/v1/score", rowsBody(d, 0, 2))
	require.Equal(t, 200, code)
	require.Contains(t, v["caution"], "decision aid")
	code, v = post(t, c, l.url+"/v1/encode", rowsBody(d, 0, 2))
	require.Equal(t, 200, code)
	require.Len(t, v["codes"], 2)
	code, v = post(t, c, l.url+"/v1/reconstruct", rowsBody(d, 0, 1))
	require.Equal(t, 200, code)
	require.Len(t, v["rows"].([]any)[0], 30)
	resp, err := c.Get(l.url + "/metrics")
	require.NoError(t, err)
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	for _, s := range []string{`quern_requests_total{route="/v1/score",code="400"}`, "quern_request_duration_seconds_bucket", "quern_anomaly_rate", "quern_request_errors_total 17", `route="unknown",code="404"`} {
		require.Contains(t, string(body), s)
	}
}

func TestBadModelOnReloadKeepsTheOldOne(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "m.qm")
	writeAE(t, path, 1)
	l := start(t, Config{ModelPath: path})
	before := l.s.Model()
	require.NoError(t, os.WriteFile(path, []byte("QUERNMDL truncated"), 0o644))
	c := &http.Client{Timeout: 5 * time.Second}
	code, v := post(t, c, l.url+"/admin/reload", nil)
	require.Equal(t, 422, code)
	require.Contains(t, v["error"], "current model kept")
	require.Same(t, before, l.s.Model())
	code, _ = post(t, c, l.url+"/v1/score", rowsBody(breastCancer(t), 0, 1))
	require.Equal(t, 200, code)
}

func TestBearerToken(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "m.qm")
	writeAE(t, path, 1)
	l := start(t, Config{ModelPath: path, Token: "s3cret"})
	c := &http.Client{Timeout: 5 * time.Second}
	code, _ := post(t, c, l.url+"/v1/score", rowsBody(breastCancer(t), 0, 1))
	require.Equal(t, 401, code)
	// the scheme is case-insensitive (RFC 7235, section 2.1); the token
	// is not
	for h, want := range map[string]int{"Bearer s3cret": 200, "bearer s3cret": 200, "BEARER s3cret": 200,
		"Bearer S3cret": 401, "Basic s3cret": 401, "Bearers3cret": 401, "s3cret": 401} {
		req, _ := http.NewRequest("POST", l.url+"/v1/score", bytes.NewReader(rowsBody(breastCancer(t), 0, 1)))
		req.Header.Set("Authorization", h)
		resp, err := c.Do(req)
		require.NoError(t, err)
		resp.Body.Close()
		require.Equal(t, want, resp.StatusCode, h)
	}
	resp, err := c.Get(l.url + "/healthz")
	require.NoError(t, err)
	resp.Body.Close()
	require.Equal(t, 200, resp.StatusCode)
}

// Shutdown drains: a request whose body is still arriving when shutdown
// begins completes with 200, and Serve returns after it.
func TestShutdownDrains(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "m.qm")
	writeAE(t, path, 1)
	s, err := New(Config{ModelPath: path})
	require.NoError(t, err)
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Serve(ctx, ln) }()
	pr, pw := io.Pipe()
	status := make(chan int, 1)
	go func() {
		resp, err := http.Post("http://"+ln.Addr().String()+"/v1/score", "application/json", pr)
		if err != nil {
			status <- -1
			return
		}
		io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		status <- resp.StatusCode
	}()
	body := rowsBody(breastCancer(t), 0, 1)
	pw.Write(body[:10])
	time.Sleep(50 * time.Millisecond) // the request is in flight
	cancel()
	time.Sleep(50 * time.Millisecond)
	select {
	case <-done:
		t.Fatal("Serve returned while a request was in flight")
	default:
	}
	pw.Write(body[10:])
	pw.Close()
	require.Equal(t, 200, <-status)
	require.NoError(t, <-done)
}

// While draining, the server still answers, says so on /readyz (503), and
// closes every connection after its answer, so that keep-alive clients
// do not send on a connection the server is about to close.
func TestDrainingClosesConnections(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "m.qm")
	writeAE(t, path, 1)
	s, err := New(Config{ModelPath: path, DrainDelay: 400 * time.Millisecond})
	require.NoError(t, err)
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Serve(ctx, ln) }()
	url := "http://" + ln.Addr().String()
	c := &http.Client{Timeout: 5 * time.Second}
	resp, err := c.Get(url + "/readyz")
	require.NoError(t, err)
	resp.Body.Close()
	require.Equal(t, 200, resp.StatusCode)
	require.False(t, resp.Close, "keep-alive before draining")
	cancel()
	time.Sleep(50 * time.Millisecond)
	resp, err = c.Get(url + "/readyz")
	require.NoError(t, err)
	resp.Body.Close()
	require.Equal(t, 503, resp.StatusCode)
	require.True(t, resp.Close, "Connection: close while draining")
	code, _ := post(t, c, url+"/v1/score", rowsBody(breastCancer(t), 0, 1))
	require.Equal(t, 200, code, "requests are still answered while draining")
	require.NoError(t, <-done)
}

func TestVAESampling(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "v.qm")
	d := breastCancer(t)
	m, err := vae.New(vae.Config{Inputs: 30, Hidden: []int{8}, Latent: 2, Likelihood: vae.Gaussian, Seed: 1})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 1})
	require.NoError(t, m.Save(path, nil))
	l := start(t, Config{ModelPath: path})
	c := &http.Client{Timeout: 5 * time.Second}
	code, a := post(t, c, l.url+"/v1/sample", []byte(`{"count": 3, "seed": 7}`))
	require.Equal(t, 200, code)
	_, b := post(t, c, l.url+"/v1/sample", []byte(`{"count": 3, "seed": 7}`))
	require.Equal(t, a, b)
	require.Len(t, a["rows"], 3)
	code, _ = post(t, c, l.url+"/v1/sample", []byte(`{"count": 3}`))
	require.Equal(t, 400, code)
	code, _ = post(t, c, l.url+"/v1/score", rowsBody(d, 0, 1))
	require.Equal(t, 422, code, "no threshold yet")
	// calibrated, the VAE scores rows by negative ELBO
	_, err = m.Calibrate(d.X, d.Rows, anomaly.Config{Method: anomaly.Max})
	require.NoError(t, err)
	require.NoError(t, m.Save(path, nil))
	code, _ = post(t, c, l.url+"/admin/reload", nil)
	require.Equal(t, 200, code)
	code, v := post(t, c, l.url+"/v1/score", rowsBody(d, 0, 2))
	require.Equal(t, 200, code)
	require.Len(t, v["results"], 2)
}

// The server reads model files and answers from the graph-free passes: it
// links no graph library (the training engine and gorgonia stay out of
// every service that embeds it).
func TestServerLinksNoGraphLibrary(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the go command")
	}
	out, err := exec.Command("go", "list", "-deps", ".").Output()
	require.NoError(t, err)
	for _, p := range strings.Fields(string(out)) {
		require.NotContains(t, p, "gorgonia", "serve depends on %s", p)
		require.NotContains(t, p, "quern/internal/engine")
		require.NotContains(t, p, "quern/train")
		require.NotContains(t, p, "quern/optim")
	}
}

// Rows may come as records keyed by the model's column names, in any
// order and with extra keys: the same scores as the arrays; a missing
// name, a null, both forms at once, and records for a model whose columns
// have no names are 400s naming the problem.
func TestRecordsByColumnName(t *testing.T) {
	dir := t.TempDir()
	shared := *breastCancer(t) // a copy: the loaded set is shared between tests
	d := &shared
	names := make([]string, 30)
	for j := range names {
		names[j] = fmt.Sprintf("f%02d", j)
	}
	d.Columns = names
	m, err := ae.New(ae.Config{Inputs: 30, Hidden: []int{16}, Latent: 4, Seed: 3})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 2})
	_, err = m.Calibrate(d.X, d.Rows, anomaly.Config{FalseAlarm: 0.05})
	require.NoError(t, err)
	path := filepath.Join(dir, "named.qm")
	require.NoError(t, m.Save(path, nil))
	l := start(t, Config{ModelPath: path})
	c := &http.Client{Timeout: 5 * time.Second}
	code, arrays := post(t, c, l.url+"/v1/score", rowsBody(d, 0, 2))
	require.Equal(t, 200, code)
	var recs []map[string]any
	for r := 0; r < 2; r++ {
		rec := map[string]any{"device": "pump-7"}
		for j := 29; j >= 0; j-- { // reverse order: keys are names, not places
			rec[names[j]] = d.X[r*30+j]
		}
		recs = append(recs, rec)
	}
	body, _ := json.Marshal(map[string]any{"records": recs})
	code, byName := post(t, c, l.url+"/v1/score", body)
	require.Equal(t, 200, code, "%v", byName)
	require.Equal(t, arrays["results"], byName["results"])
	delete(recs[1], "f07")
	body, _ = json.Marshal(map[string]any{"records": recs})
	code, v := post(t, c, l.url+"/v1/score", body)
	require.Equal(t, 400, code)
	require.Contains(t, v["error"], `record 2 has no "f07"`)
	code, v = post(t, c, l.url+"/v1/score", []byte(`{"rows": [], "records": []}`))
	require.Equal(t, 400, code)
	require.Contains(t, v["error"], "not both")
	code, v = post(t, c, l.url+"/v1/score", []byte(`{"records": [{"f00": null}]}`))
	require.Equal(t, 400, code)
	require.Contains(t, v["error"], "record 1")

	plain := filepath.Join(dir, "plain.qm")
	writeAE(t, plain, 1)
	l2 := start(t, Config{ModelPath: plain})
	code, v = post(t, c, l2.url+"/v1/score", []byte(`{"records": [{"c0": 1}]}`))
	require.Equal(t, 400, code)
	require.Contains(t, v["error"], "columns have no names")
}

// A model of a table read by type takes records keyed by its columns'
// names, with texts, numbers, booleans and nulls: the same scores as the
// same rows read from a CSV by the model's encoding; a level not seen in
// training and a missing value are said in "read"; a record with nothing
// observed is unscorable (null score, flagged); arrays of numbers, and a
// record without a column, are 400s naming the columns.
func TestTypedRecords(t *testing.T) {
	dir := t.TempDir()
	var b strings.Builder
	b.WriteString("amount,channel,card\n")
	for i := range 300 {
		ch := []string{"web", "shop", "phone"}[i%3]
		card := []string{"yes", "no"}[(i/3)%2]
		amount := fmt.Sprint(10 + (i*7)%23)
		if i%17 == 0 {
			amount = ""
		}
		fmt.Fprintf(&b, "%s,%s,%s\n", amount, ch, card)
	}
	d, err := data.ReadCSV(strings.NewReader(b.String()), "pay.csv", data.CSVConfig{Typed: true})
	require.NoError(t, err)
	m, err := ae.New(ae.Config{Inputs: d.Cols, Hidden: []int{8}, Latent: 2, Seed: 3})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 2})
	_, err = m.Calibrate(d.X, d.Rows, anomaly.Config{FalseAlarm: 0.05})
	require.NoError(t, err)
	path := filepath.Join(dir, "typed.qm")
	require.NoError(t, m.Save(path, nil))

	later := "card,channel,amount\nno,web,12\nyes,fax,\ntrue,shop,30\n,,\n"
	want, err := data.ReadCSV(strings.NewReader(later), "later.csv", data.CSVConfig{Encoding: d.Encoding})
	require.NoError(t, err)
	wantScores, err := m.Score(want.X, want.Rows, 2)
	require.NoError(t, err)

	l := start(t, Config{ModelPath: path})
	c := &http.Client{Timeout: 5 * time.Second}
	body := []byte(`{"top": 2, "records": [
		{"amount": 12, "channel": "web", "card": "no", "id": "a1"},
		{"card": "yes", "amount": null, "channel": "fax"},
		{"channel": "shop", "amount": "30", "card": true},
		{"channel": null, "amount": null, "card": null}]}`)
	code, v := post(t, c, l.url+"/v1/score", body)
	require.Equal(t, 200, code, "%v", v)
	res := v["results"].([]any)
	require.Len(t, res, 4)
	for i := range 3 {
		r := res[i].(map[string]any)
		require.InDelta(t, wantScores[i].Value, r["score"], 1e-6*wantScores[i].Value, "record %d", i+1)
		for _, f := range r["top_features"].([]any) {
			require.Contains(t, []string{"amount", "channel", "card"}, f.(map[string]any)["name"], "features are the table's columns")
		}
	}
	require.NotContains(t, res[0].(map[string]any), "read")
	require.Contains(t, res[1].(map[string]any)["read"], `channel: level "fax" not seen in training`)
	require.Contains(t, res[1].(map[string]any)["read"], "amount: missing, filled with")
	last := res[3].(map[string]any)
	require.Nil(t, last["score"])
	require.Equal(t, true, last["anomaly"])
	require.Equal(t, "no observed cell", last["unscorable"])

	// reconstructions come back as the table's cells too
	code, v = post(t, c, l.url+"/v1/reconstruct", []byte(`{"records": [{"amount": 12, "channel": "web", "card": "no"}]}`))
	require.Equal(t, 200, code, "%v", v)
	rec := v["records"].([]any)[0].(map[string]any)
	require.Contains(t, []string{"web", "shop", "phone"}, rec["channel"])
	require.Contains(t, []string{"yes", "no"}, rec["card"])

	code, v = post(t, c, l.url+"/v1/score", []byte(`{"records": [{"amount": 1, "channel": "web"}]}`))
	require.Equal(t, 400, code)
	require.Contains(t, v["error"], `record 1 has no "card" (the model reads amount, channel, card`)
	code, v = post(t, c, l.url+"/v1/score", []byte(`{"rows": [[1, 0, 0, 1, 0, 1]]}`))
	require.Equal(t, 400, code)
	require.Contains(t, v["error"], "send \"records\"")
	code, v = post(t, c, l.url+"/v1/score", []byte(`{"records": [{"amount": [1], "channel": "web", "card": "no"}]}`))
	require.Equal(t, 400, code)
	require.Contains(t, v["error"], `"amount" is [1]`)
}

// A convolutional VAE serves as a dense one does: the server needs no
// change for a new shape of network. Images are rows of pixels; scores,
// encodings and samples come back, the same for the same request.
func TestConvolutionalModel(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "c.qm")
	d, err := data.LoadIDX("../testdata/fashion-mnist/t10k-images-idx3-ubyte-first500.gz", data.IDXConfig{})
	require.NoError(t, err)
	m, err := vae.New(vae.Config{Inputs: 784, Image: d.Image, Channels: []int{4, 8}, Hidden: []int{}, Latent: 3, Seed: 1})
	require.NoError(t, err)
	trainenv.Fit(t, m, d, nil, train.Settings{Epochs: 1})
	_, err = m.Calibrate(d.X, d.Rows, anomaly.Config{FalseAlarm: 0.05})
	require.NoError(t, err)
	require.NoError(t, m.Save(path, nil))
	l := start(t, Config{ModelPath: path})
	c := &http.Client{Timeout: 5 * time.Second}
	code, v := post(t, c, l.url+"/v1/score", rowsBody(d, 0, 3))
	require.Equal(t, 200, code, "%v", v)
	require.Len(t, v["results"], 3)
	want, err := m.NegELBO(d.X[:3*784], 3)
	require.NoError(t, err)
	for i, r := range v["results"].([]any) {
		require.InDelta(t, want[i], r.(map[string]any)["score"].(float64), 1e-9*want[i])
	}
	code, a := post(t, c, l.url+"/v1/sample", []byte(`{"count": 2, "seed": 7}`))
	require.Equal(t, 200, code)
	_, b := post(t, c, l.url+"/v1/sample", []byte(`{"count": 2, "seed": 7}`))
	require.Equal(t, a, b)
	require.Len(t, a["rows"].([]any)[0], 784)
}
