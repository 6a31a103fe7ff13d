package watch

import (
	"bufio"
	"encoding/json"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// readEvent reads one server-sent event (the format of the WHATWG HTML
// standard's "server-sent events" section): its type and data.
func readEvent(t *testing.T, br *bufio.Reader) (string, string) {
	t.Helper()
	var event, data string
	for {
		line, err := br.ReadString('\n')
		require.NoError(t, err)
		line = strings.TrimRight(line, "\n")
		switch {
		case line == "" && data != "":
			return event, data
		case strings.HasPrefix(line, "event: "):
			event = line[len("event: "):]
		case strings.HasPrefix(line, "data: "):
			data += line[len("data: "):]
		}
	}
}

func TestEventsFollowTheRun(t *testing.T) {
	p := New("a run")
	srv := httptest.NewServer(p.Handler())
	defer srv.Close()
	resp, err := http.Get(srv.URL + "/events")
	require.NoError(t, err)
	defer resp.Body.Close()
	require.Equal(t, "text/event-stream", resp.Header.Get("Content-Type"))
	br := bufio.NewReader(resp.Body)
	ev, data := readEvent(t, br)
	require.Equal(t, "state", ev)
	var s snapshot
	require.NoError(t, json.Unmarshal([]byte(data), &s))
	require.Equal(t, "a run", s.Title)
	require.Empty(t, s.Epochs)

	p.AddEpoch(Epoch{Epoch: 1, Train: []Metric{{"loss", 2}, {"kl", math.NaN()}}, Validation: []Metric{{"loss", 3}}, Best: true})
	_, data = readEvent(t, br)
	require.NoError(t, json.Unmarshal([]byte(data), &s))
	require.Len(t, s.Epochs, 1)
	require.Equal(t, []Metric{{"loss", 2}}, s.Epochs[0].Train, "a non-finite value is left out, never sent as invalid JSON")
	require.Equal(t, []string{"loss"}, s.Metrics)

	p.SetFigure("samples", "grid", []byte("\x89PNG"))
	_, data = readEvent(t, br)
	require.NoError(t, json.Unmarshal([]byte(data), &s))
	require.Len(t, s.Figures, 1)
	fig, err := http.Get(srv.URL + "/" + s.Figures[0].URL)
	require.NoError(t, err)
	b, _ := io.ReadAll(fig.Body)
	fig.Body.Close()
	require.Equal(t, "\x89PNG", string(b))
	require.Equal(t, "image/png", fig.Header.Get("Content-Type"))

	p.AddEpoch(Epoch{Epoch: 2, Train: []Metric{{"loss", 1}}, Best: true})
	_, data = readEvent(t, br)
	s = snapshot{}
	require.NoError(t, json.Unmarshal([]byte(data), &s))
	require.False(t, s.Epochs[0].Best, "one best epoch at a time")
	require.True(t, s.Epochs[1].Best)

	p.Finish("finished")
	ev, data = readEvent(t, br)
	require.Equal(t, "done", ev)
	require.Contains(t, data, `"done":"finished"`)
	done := make(chan error, 1)
	go func() { _, err := br.ReadString('\n'); done <- err }()
	select {
	case err := <-done:
		require.ErrorIs(t, err, io.EOF, "the stream ends after done")
	case <-time.After(5 * time.Second):
		t.Fatal("the stream stayed open after the run ended")
	}
}

func TestStatusIsThrottledAndPagesServed(t *testing.T) {
	p := New("r")
	v := p.version
	for i := 0; i < 100; i++ {
		p.SetStatus(Status{Epoch: 1, Epochs: 2, Step: i, Steps: 100, RowsPerSec: math.Inf(1)})
	}
	require.LessOrEqual(t, p.version-v, 2, "a burst of steps wakes the streams once or twice, not a hundred times")
	require.Equal(t, 99, p.status.Step, "the latest status is kept")
	require.Zero(t, p.status.RowsPerSec)
	srv := httptest.NewServer(p.Handler())
	defer srv.Close()
	resp, err := http.Get(srv.URL + "/")
	require.NoError(t, err)
	b, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	require.Contains(t, string(b), `new EventSource("events")`)
	for _, path := range []string{"/figure/none.png", "/figure/x", "/nothing"} {
		resp, err := http.Get(srv.URL + path)
		require.NoError(t, err)
		resp.Body.Close()
		require.Equal(t, http.StatusNotFound, resp.StatusCode, path)
	}
}

func TestLoopback(t *testing.T) {
	for addr, want := range map[string]bool{"127.0.0.1:80": true, "[::1]:80": true, "localhost:80": true, "0.0.0.0:80": false, ":80": false, "10.0.0.1:80": false, "nonsense": false} {
		require.Equal(t, want, Loopback(addr), addr)
	}
}
