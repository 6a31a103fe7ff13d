package watch

import (
	"bytes"
	_ "embed"
	"encoding/json"
	"fmt"
	"math"
	"net"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"
)

// Metric is a named figure of a step or an epoch.
type Metric struct {
	Name  string  `json:"name"`
	Value float64 `json:"value"`
}

// Status is the run's state at a step, as the status line shows it.
type Status struct {
	Phase   string   `json:"phase"`
	Epoch   int      `json:"epoch"`
	Epochs  int      `json:"epochs"`
	Step    int      `json:"step"`
	Steps   int      `json:"steps"`
	Metrics []Metric `json:"metrics,omitempty"`
	// RowsPerSec is the training pace; Remaining the estimated time left.
	RowsPerSec float64 `json:"rows_per_sec"`
	Remaining  float64 `json:"remaining_s"`
	Elapsed    float64 `json:"elapsed_s"`
}

// Epoch is one finished epoch's averages.
type Epoch struct {
	Epoch      int      `json:"epoch"`
	Train      []Metric `json:"train"`
	Validation []Metric `json:"validation,omitempty"`
	Best       bool     `json:"best,omitempty"`
}

// Page is the live page of one run.
type Page struct {
	title string

	mu      sync.Mutex
	status  Status
	epochs  []Epoch
	order   []string          // metric names in first-seen order
	figures map[string]figure // name -> PNG
	done    string            // set when the run ends: how it ended
	version int               // bumped on every change
	changed chan struct{}     // closed and replaced on every change
	lastPub time.Time
}

type figure struct {
	png     []byte
	caption string
	version int
}

// New returns a page titled title.
func New(title string) *Page {
	return &Page{title: title, figures: map[string]figure{}, changed: make(chan struct{})}
}

// publishLocked wakes every waiting stream.
func (p *Page) publishLocked() {
	p.version++
	close(p.changed)
	p.changed = make(chan struct{})
}

// SetStatus records the run's state; streams are woken at most ten times
// a second for it.
func (p *Page) SetStatus(s Status) {
	s.Metrics = clean(s.Metrics)
	for _, v := range []*float64{&s.RowsPerSec, &s.Remaining, &s.Elapsed} {
		if math.IsNaN(*v) || math.IsInf(*v, 0) {
			*v = 0
		}
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	p.status = s
	if now := time.Now(); now.Sub(p.lastPub) >= 100*time.Millisecond {
		p.lastPub = now
		p.publishLocked()
	}
}

// AddEpoch records a finished epoch.
func (p *Page) AddEpoch(e Epoch) {
	e.Train, e.Validation = clean(e.Train), clean(e.Validation)
	p.mu.Lock()
	defer p.mu.Unlock()
	for _, ms := range [][]Metric{e.Train, e.Validation} {
		for _, m := range ms {
			known := false
			for _, o := range p.order {
				known = known || o == m.Name
			}
			if !known {
				p.order = append(p.order, m.Name)
			}
		}
	}
	if e.Best {
		for i := range p.epochs {
			p.epochs[i].Best = false
		}
	}
	p.epochs = append(p.epochs, e)
	p.publishLocked()
}

// SetFigure replaces the PNG figure called name (a sample grid, a score
// histogram) with its caption.
func (p *Page) SetFigure(name, caption string, png []byte) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.figures[name] = figure{png: append([]byte(nil), png...), caption: caption, version: p.version + 1}
	p.publishLocked()
}

// Finish marks the run as ended, with a line saying how.
func (p *Page) Finish(how string) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.done = how
	p.publishLocked()
}

// snapshot is what one event carries: the whole state, small enough to
// resend (a run has at most thousands of epochs).
type snapshot struct {
	Title   string      `json:"title"`
	Status  Status      `json:"status"`
	Metrics []string    `json:"metrics"`
	Epochs  []Epoch     `json:"epochs"`
	Figures []figureRef `json:"figures"`
	Done    string      `json:"done,omitempty"`
	Version int         `json:"version"`
}

type figureRef struct {
	Name    string `json:"name"`
	Caption string `json:"caption"`
	URL     string `json:"url"`
}

func (p *Page) snapshotLocked() snapshot {
	s := snapshot{Title: p.title, Status: p.status, Metrics: append([]string(nil), p.order...), Epochs: append([]Epoch(nil), p.epochs...), Done: p.done, Version: p.version}
	for _, name := range sortedKeys(p.figures) {
		f := p.figures[name]
		s.Figures = append(s.Figures, figureRef{Name: name, Caption: f.caption, URL: "figure/" + name + ".png?v=" + strconv.Itoa(f.version)})
	}
	return s
}

func sortedKeys(m map[string]figure) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	for i := 1; i < len(keys); i++ {
		for j := i; j > 0 && keys[j] < keys[j-1]; j-- {
			keys[j], keys[j-1] = keys[j-1], keys[j]
		}
	}
	return keys
}

//go:embed page.html
var pageHTML []byte

// Handler serves the page at /, its events at /events and its figures
// at /figure/NAME.png.
func (p *Page) Handler() http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("GET /{$}", func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		w.Header().Set("Cache-Control", "no-store")
		w.Write(pageHTML)
	})
	mux.HandleFunc("GET /state", func(w http.ResponseWriter, r *http.Request) {
		p.mu.Lock()
		s := p.snapshotLocked()
		p.mu.Unlock()
		w.Header().Set("Content-Type", "application/json")
		json.NewEncoder(w).Encode(s)
	})
	mux.HandleFunc("GET /events", p.events)
	mux.HandleFunc("GET /figure/{name}", func(w http.ResponseWriter, r *http.Request) {
		name, ok := strings.CutSuffix(r.PathValue("name"), ".png")
		p.mu.Lock()
		f, found := p.figures[name]
		p.mu.Unlock()
		if !ok || !found {
			http.NotFound(w, r)
			return
		}
		w.Header().Set("Content-Type", "image/png")
		w.Header().Set("Cache-Control", "max-age=3600") // the URL names the version
		http.ServeContent(w, r, name+".png", time.Time{}, bytes.NewReader(f.png))
	})
	return mux
}

// events streams the state as server-sent events: one "state" event at
// once and after every change, a comment every 15 s to keep proxies from
// closing an idle stream, and "done" when the run has ended.
func (p *Page) events(w http.ResponseWriter, r *http.Request) {
	fl, ok := w.(http.Flusher)
	if !ok {
		http.Error(w, "streaming is not supported here", http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "text/event-stream")
	w.Header().Set("Cache-Control", "no-store")
	seen := -1
	keep := time.NewTicker(15 * time.Second)
	defer keep.Stop()
	for {
		p.mu.Lock()
		s, wake := p.snapshotLocked(), p.changed
		p.mu.Unlock()
		if s.Version != seen {
			seen = s.Version
			b, err := json.Marshal(s)
			if err != nil {
				return
			}
			event := "state"
			if s.Done != "" {
				event = "done"
			}
			if _, err := fmt.Fprintf(w, "event: %s\nid: %d\ndata: %s\n\n", event, s.Version, b); err != nil {
				return
			}
			fl.Flush()
			if s.Done != "" {
				return // the run has ended: nothing more will come
			}
		}
		select {
		case <-wake:
		case <-keep.C:
			if _, err := fmt.Fprint(w, ": still here\n\n"); err != nil {
				return
			}
			fl.Flush()
		case <-r.Context().Done():
			return
		}
	}
}

// clean leaves out non-finite values, which JSON cannot carry: the page
// shows a gap for that metric there.
func clean(ms []Metric) []Metric {
	if ms == nil {
		return nil
	}
	out := make([]Metric, 0, len(ms))
	for _, m := range ms {
		if !math.IsNaN(m.Value) && !math.IsInf(m.Value, 0) {
			out = append(out, m)
		}
	}
	return out
}

// Loopback reports whether a listen address accepts connections from
// this machine only.
func Loopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}
