package serve

import (
	"context"
	"crypto/subtle"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"net/http"
	"path/filepath"
	"strconv"
	"strings"
	"sync/atomic"
	"time"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/fleet"
	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/model"
)

// Loaded is the model being served: the model, the file it came from and
// when it was read.
type Loaded struct {
	Model  model.Model
	Path   string
	Loaded time.Time
	// cells encodes records by the model's table encoding (nil: the
	// model reads numbers as they are)
	cells *data.RowEncoder
}

// Kind is the served model's kind.
func (l *Loaded) Kind() string { return l.Model.Kind() }

// LoadModel reads and checks a model file. A failure of the loaders
// themselves (a panic, which no file should cause) is returned as an
// error too: a serving process never dies on a file.
func LoadModel(path string) (l *Loaded, err error) {
	defer func() {
		if r := recover(); r != nil {
			l, err = nil, fmt.Errorf("serve: loading %s failed inside quern (please report it): %v", path, r)
		}
	}()
	m, err := model.Open(path)
	if err != nil {
		return nil, err
	}
	return loaded(m, path)
}

// loadBytes is LoadModel of a file already read (a fleet member, checked
// against its hash).
func loadBytes(b []byte, path string) (l *Loaded, err error) {
	defer func() {
		if r := recover(); r != nil {
			l, err = nil, fmt.Errorf("serve: loading %s failed inside quern (please report it): %v", path, r)
		}
	}()
	m, err := model.Decode(b, path)
	if err != nil {
		return nil, err
	}
	return loaded(m, path)
}

func loaded(m model.Model, path string) (*Loaded, error) {
	l := &Loaded{Model: m, Path: path, Loaded: time.Now()}
	if enc := m.Schema().Encoding; enc != nil {
		var err error
		if l.cells, err = data.NewRowEncoder(enc); err != nil {
			return nil, fmt.Errorf("serve: %s: %w", path, err)
		}
	}
	return l, nil
}

// Config configures a Server. Zero fields mean the documented defaults.
type Config struct {
	// ModelPath is the model file to serve (and to reload). It or
	// FleetPath is required.
	ModelPath string
	// FleetPath is a fleet's folder (quern train -group) to serve instead
	// of one model: each record goes to the model of its group (the
	// fleet's group column), or the shared model for a group without
	// one; POST /v1/groups/{group}/... names the group in the path.
	FleetPath string
	// Token, when set, is required as "Authorization: Bearer <token>" on
	// every route but /healthz and /readyz.
	Token string
	// MaxBodyBytes limits request bodies. Default 1 MiB.
	MaxBodyBytes int64
	// MaxRows limits rows per request (and samples per sample request).
	// Default 1000.
	MaxRows int
	// ReadTimeout, WriteTimeout and IdleTimeout bound connections.
	// Defaults 10 s, 30 s and 60 s.
	ReadTimeout, WriteTimeout, IdleTimeout time.Duration
	// ShutdownTimeout bounds the wait for requests in flight when the
	// context ends. Default 30 s.
	ShutdownTimeout time.Duration
	// DrainDelay is how long the server keeps answering after the context
	// ends, with /readyz saying 503 and every response closing its
	// connection, so that load balancers and keep-alive clients move away
	// before it stops accepting. Default 2 s; negative: none.
	DrainDelay time.Duration
	// Logger receives structured request logs. Default: discard.
	Logger *slog.Logger
}

// Server answers JSON requests with one model, swapped atomically on
// reload. It is safe for concurrent use.
type Server struct {
	cfg      Config
	model    atomic.Pointer[Loaded]
	fleet    *fleet.Fleet[*Loaded] // nil: one model
	draining atomic.Bool
	m        *metrics
	log      *slog.Logger
	mux      *http.ServeMux
}

// New loads the model and prepares the routes.
func New(cfg Config) (*Server, error) {
	if (cfg.ModelPath == "") == (cfg.FleetPath == "") {
		return nil, errors.New("serve: give ModelPath or FleetPath (one of them)")
	}
	if cfg.MaxBodyBytes == 0 {
		cfg.MaxBodyBytes = 1 << 20
	}
	if cfg.MaxRows == 0 {
		cfg.MaxRows = 1000
	}
	if cfg.ReadTimeout == 0 {
		cfg.ReadTimeout = 10 * time.Second
	}
	if cfg.WriteTimeout == 0 {
		cfg.WriteTimeout = 30 * time.Second
	}
	if cfg.IdleTimeout == 0 {
		cfg.IdleTimeout = 60 * time.Second
	}
	if cfg.ShutdownTimeout == 0 {
		cfg.ShutdownTimeout = 30 * time.Second
	}
	if cfg.DrainDelay == 0 {
		cfg.DrainDelay = 2 * time.Second
	}
	if cfg.MaxBodyBytes < 0 || cfg.MaxRows < 0 {
		return nil, errors.New("serve: negative limits")
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.NewTextHandler(discard{}, nil))
	}
	s := &Server{cfg: cfg, m: newMetrics(), log: cfg.Logger, mux: http.NewServeMux()}
	if cfg.FleetPath != "" {
		f, err := fleet.OpenWith(cfg.FleetPath, loadBytes)
		if err != nil {
			return nil, err
		}
		if f.Any() == nil {
			return nil, fmt.Errorf("serve: the fleet %s has no models", cfg.FleetPath)
		}
		s.fleet = f
		s.fleetRoutes()
		return s, nil
	}
	m, err := LoadModel(cfg.ModelPath)
	if err != nil {
		return nil, err
	}
	s.model.Store(m)
	s.routes()
	return s, nil
}

type discard struct{}

func (discard) Write(p []byte) (int, error) { return len(p), nil }

// Model returns the model being served; for a fleet, one of its models
// (the shared one, else the first member), which says what they have in
// common: kind and columns.
func (s *Server) Model() *Loaded {
	if s.fleet != nil {
		return s.fleet.Any().Value
	}
	return s.model.Load()
}

// Fleet returns the fleet being served, or nil.
func (s *Server) Fleet() *fleet.Fleet[*Loaded] { return s.fleet }

// Reload reads the model file again and swaps it in atomically. A bad file
// is refused and the current model keeps serving. Requests in flight
// finish with the model they started with.
func (s *Server) Reload() error {
	if s.fleet != nil {
		_, err := s.reloadFleet("", false)
		return err
	}
	m, err := LoadModel(s.cfg.ModelPath)
	if err != nil {
		s.m.failures.Add(1)
		s.log.Error("reload refused; keeping the current model", "path", s.cfg.ModelPath, "error", err.Error())
		return err
	}
	s.model.Store(m)
	s.m.reloads.Add(1)
	s.log.Info("model reloaded", "path", s.cfg.ModelPath, "kind", m.Kind())
	return nil
}

// Handler returns the HTTP handler.
func (s *Server) Handler() http.Handler { return s }

// ServeHTTP routes a request, with logging, metrics, limits and auth.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	start := time.Now()
	s.m.inflight.Add(1)
	defer s.m.inflight.Add(-1)
	rec := &recorder{ResponseWriter: w, code: http.StatusOK}
	if s.draining.Load() {
		// the connection ends with this answer: the client opens a new
		// one, to a server that is not stopping
		w.Header().Set("Connection", "close")
	}
	route := "unknown"
	if _, pattern := s.mux.Handler(r); pattern != "" && pattern != "/" {
		route = pattern
	}
	if s.cfg.Token != "" && route != "/healthz" && route != "/readyz" && !s.authorised(r) {
		writeError(rec, http.StatusUnauthorized, "missing or wrong bearer token")
	} else {
		r.Body = http.MaxBytesReader(rec, r.Body, s.cfg.MaxBodyBytes)
		s.mux.ServeHTTP(rec, r)
	}
	d := time.Since(start)
	s.m.observe(route, rec.code, d)
	s.log.Info("request", "method", r.Method, "path", r.URL.Path, "status", rec.code, "duration_us", d.Microseconds(), "bytes", rec.n)
}

func (s *Server) authorised(r *http.Request) bool {
	h := r.Header.Get("Authorization")
	// the scheme is case-insensitive (RFC 7235, section 2.1)
	scheme, tok, ok := strings.Cut(h, " ")
	return ok && strings.EqualFold(scheme, "Bearer") && subtle.ConstantTimeCompare([]byte(strings.TrimLeft(tok, " ")), []byte(s.cfg.Token)) == 1
}

type recorder struct {
	http.ResponseWriter
	code int
	n    int
}

func (r *recorder) WriteHeader(code int) {
	r.code = code
	r.ResponseWriter.WriteHeader(code)
}

func (r *recorder) Write(b []byte) (int, error) {
	n, err := r.ResponseWriter.Write(b)
	r.n += n
	return n, err
}

// writeJSON answers with v as JSON; a value JSON cannot hold (a NaN, for
// one) is a 500 naming the problem, never a 200 with an empty body.
func writeJSON(w http.ResponseWriter, code int, v any) {
	b, err := json.Marshal(v)
	if err != nil {
		code = http.StatusInternalServerError
		b, _ = json.Marshal(errorBody{Error: fmt.Sprintf("the answer cannot be written as JSON: %v", err)})
	}
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	w.Write(append(b, '\n'))
}

type errorBody struct {
	Error string `json:"error"`
}

func writeError(w http.ResponseWriter, code int, format string, args ...any) {
	writeJSON(w, code, errorBody{Error: fmt.Sprintf(format, args...)})
}

func (s *Server) routes() {
	s.mux.HandleFunc("/v1/score", only("POST", s.single(s.score)))
	s.mux.HandleFunc("/v1/encode", only("POST", s.single(s.encode)))
	s.mux.HandleFunc("/v1/reconstruct", only("POST", s.single(s.reconstruct)))
	s.mux.HandleFunc("/v1/sample", only("POST", s.single(s.sample)))
	s.mux.HandleFunc("/admin/reload", only("POST", func(w http.ResponseWriter, r *http.Request) {
		if err := s.Reload(); err != nil {
			writeError(w, http.StatusUnprocessableEntity, "reload refused, current model kept: %v", err)
			return
		}
		m := s.Model()
		writeJSON(w, http.StatusOK, map[string]string{"status": "reloaded", "kind": m.Kind()})
	}))
	s.common("POST /v1/score, /v1/encode, /v1/reconstruct, /v1/sample, /admin/reload")
}

// common registers the routes of every server: health, readiness,
// metrics, and the answer to an unknown route.
func (s *Server) common(routes string) {
	s.mux.HandleFunc("/healthz", only("GET", func(w http.ResponseWriter, r *http.Request) {
		writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
	}))
	s.mux.HandleFunc("/readyz", only("GET", func(w http.ResponseWriter, r *http.Request) {
		if s.draining.Load() {
			writeError(w, http.StatusServiceUnavailable, "draining: the server is stopping")
			return
		}
		m := s.Model()
		if m == nil {
			writeError(w, http.StatusServiceUnavailable, "no model loaded")
			return
		}
		v := map[string]any{"status": "ready", "kind": m.Kind(), "inputs": m.Model.Width(), "loaded": m.Loaded.UTC().Format(time.RFC3339)}
		if s.fleet != nil {
			ix := s.fleet.Index()
			v["group_column"], v["models"], v["shared"] = ix.GroupColumn, s.fleet.Len(), s.fleet.Shared() != nil
		}
		writeJSON(w, http.StatusOK, v)
	}))
	s.mux.HandleFunc("/metrics", only("GET", func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Content-Type", "text/plain; version=0.0.4; charset=utf-8")
		m := s.Model()
		s.m.write(w, m.Kind(), m.Loaded)
		if s.fleet != nil {
			s.m.writeFleet(w, s.fleet.Len(), s.fleet.Shared() != nil)
		}
	}))
	s.mux.HandleFunc("/", func(w http.ResponseWriter, r *http.Request) {
		writeError(w, http.StatusNotFound, "no route %s %s; routes: %s; GET /healthz, /readyz, /metrics", r.Method, r.URL.Path, routes)
	})
}

// only answers 405 with a JSON error for other methods.
func only(method string, h http.HandlerFunc) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		if r.Method != method {
			w.Header().Set("Allow", method)
			writeError(w, http.StatusMethodNotAllowed, "%s %s: use %s", r.Method, r.URL.Path, method)
			return
		}
		h(w, r)
	}
}

// jsonProblem says what is wrong with a request body in the API's terms:
// the field and what it takes, or where the JSON breaks, never Go's type
// names.
func jsonProblem(err error) string {
	var te *json.UnmarshalTypeError
	var se *json.SyntaxError
	switch {
	case errors.As(err, &te):
		want := map[string]string{
			"rows":    "an array of rows, each an array of numbers",
			"records": "an array of objects keyed by the model's column names",
			"top":     "a whole number",
			"n":       "a whole number",
			"seed":    "a whole number, 0 or more",
		}[te.Field]
		if want == "" {
			want = "a value of another type"
		}
		if te.Field == "" {
			return fmt.Sprintf("the request body must be a JSON object, not a JSON %s", te.Value)
		}
		return fmt.Sprintf("field %q takes %s; got a JSON %s at byte %d", te.Field, want, te.Value, te.Offset)
	case errors.As(err, &se):
		return fmt.Sprintf("malformed JSON at byte %d: %s", se.Offset, strings.TrimPrefix(se.Error(), "json: "))
	case errors.Is(err, io.EOF):
		return "the request body is empty: send a JSON object"
	case errors.Is(err, io.ErrUnexpectedEOF):
		return "malformed JSON: the body ends in the middle of a value"
	}
	msg := strings.TrimPrefix(err.Error(), "json: ")
	if name, ok := strings.CutPrefix(msg, "unknown field "); ok {
		return fmt.Sprintf("unknown field %s in the request", name)
	}
	return "malformed JSON: " + msg
}

// decodeJSON reads one JSON object into v, refusing unknown fields and
// trailing data, and answers 413 or 400 itself when it cannot.
func decodeJSON(w http.ResponseWriter, r *http.Request, v any) bool {
	dec := json.NewDecoder(r.Body)
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		var mb *http.MaxBytesError
		if errors.As(err, &mb) {
			writeError(w, http.StatusRequestEntityTooLarge, "request body over %d bytes", mb.Limit)
		} else {
			writeError(w, http.StatusBadRequest, "%s", jsonProblem(err))
		}
		return false
	}
	if dec.More() {
		writeError(w, http.StatusBadRequest, "malformed JSON: data after the request object")
		return false
	}
	return true
}

// rowsRequest is the body of score, encode and reconstruct.
type rowsRequest struct {
	Rows [][]*float64 `json:"rows"`
	// Records are rows as objects keyed by the model's column names, in
	// any order; other keys are ignored. A request sends rows or records.
	Records []map[string]json.RawMessage `json:"records"`
	Top     int                          `json:"top,omitempty"`
}

// rowRead is what reading one record by a table encoding found.
type rowRead struct {
	text       string
	unscorable bool
}

// decodeRows reads and checks a rows request: every row cols numbers,
// none null, at most MaxRows rows. A model of a table read by type (cells
// not nil) takes records keyed by its columns' names, with texts,
// numbers, booleans or null (missing) as values; what reading each found
// is returned beside the rows (nil when nothing).
func (s *Server) decodeRows(w http.ResponseWriter, r *http.Request, cols int, names []string, cells *data.RowEncoder, fields []string) (*rowsRequest, []float32, []rowRead, bool) {
	var req rowsRequest
	if !decodeJSON(w, r, &req) {
		return nil, nil, nil, false
	}
	if g, ok := r.Context().Value(pathGroupKey{}).(pathGroup); ok {
		// a record that names another group than the path is refused,
		// never scored by the path's model
		for i, rec := range req.Records {
			if raw, ok := rec[g.column]; ok {
				if t, err := groupText(raw); err != nil || t != g.group {
					writeError(w, http.StatusBadRequest, "record %d has %s %s, but the path names %q", i+1, g.column, raw, g.group)
					return nil, nil, nil, false
				}
			}
		}
	}
	x, reads, ok := s.readRows(w, &req, cols, names, cells, fields, nil)
	return &req, x, reads, ok
}

// readRows is decodeRows once the body is read; nums, when not nil, are
// the records' places in the request (0-based) for its messages.
func (s *Server) readRows(w http.ResponseWriter, req *rowsRequest, cols int, names []string, cells *data.RowEncoder, fields []string, nums []int) ([]float32, []rowRead, bool) {
	num := func(i int) int {
		if nums != nil {
			return nums[i] + 1
		}
		return i + 1
	}
	if cells != nil && req.Records != nil {
		if req.Rows != nil {
			writeError(w, http.StatusBadRequest, "send \"rows\" or \"records\", not both")
			return nil, nil, false
		}
		if len(req.Records) == 0 {
			writeError(w, http.StatusBadRequest, "\"records\" is empty")
			return nil, nil, false
		}
		if len(req.Records) > s.cfg.MaxRows {
			writeError(w, http.StatusRequestEntityTooLarge, "%d records, the limit is %d", len(req.Records), s.cfg.MaxRows)
			return nil, nil, false
		}
		x := make([]float32, 0, len(req.Records)*cols)
		var reads []rowRead
		texts := make([]string, len(fields))
		for i, rec := range req.Records {
			for j, name := range fields {
				raw, ok := rec[name]
				if !ok {
					writeError(w, http.StatusBadRequest, "record %d has no %q (the model reads %s; null marks a missing value)", num(i), name, strings.Join(fields, ", "))
					return nil, nil, false
				}
				t, err := cellText(raw)
				if err != nil {
					writeError(w, http.StatusBadRequest, "record %d: %q is %s: %v", num(i), name, raw, err)
					return nil, nil, false
				}
				texts[j] = t
			}
			var note string
			var unscorable bool
			x, note, unscorable = cells.Encode(x, texts)
			if note != "" {
				if reads == nil {
					reads = make([]rowRead, len(req.Records))
				}
				reads[i] = rowRead{note, unscorable}
			}
		}
		req.Rows = make([][]*float64, len(req.Records)) // the count
		return x, reads, true
	}
	if cells != nil && req.Rows != nil && len(fields) != cols {
		writeError(w, http.StatusBadRequest, "the served model reads a table of %s by column name: send \"records\", objects keyed by them", strings.Join(fields, ", "))
		return nil, nil, false
	}
	if req.Records != nil {
		if req.Rows != nil {
			writeError(w, http.StatusBadRequest, "send \"rows\" or \"records\", not both")
			return nil, nil, false
		}
		if len(names) != cols {
			writeError(w, http.StatusBadRequest, "the served model's columns have no names: send \"rows\" (arrays of %d numbers)", cols)
			return nil, nil, false
		}
		if len(req.Records) > s.cfg.MaxRows {
			writeError(w, http.StatusRequestEntityTooLarge, "%d records, the limit is %d", len(req.Records), s.cfg.MaxRows)
			return nil, nil, false
		}
		// records become rows in the model's column order
		req.Rows = make([][]*float64, len(req.Records))
		for i, rec := range req.Records {
			row := make([]*float64, cols)
			for j, name := range names {
				raw, ok := rec[name]
				if !ok {
					writeError(w, http.StatusBadRequest, "record %d has no %q (the model reads %s)", num(i), name, strings.Join(names, ", "))
					return nil, nil, false
				}
				var v *float64
				if err := json.Unmarshal(raw, &v); err != nil {
					writeError(w, http.StatusBadRequest, "record %d: %q is %s, not a number", num(i), name, raw)
					return nil, nil, false
				}
				if v == nil {
					writeError(w, http.StatusBadRequest, "record %d: %q is null", num(i), name)
					return nil, nil, false
				}
				row[j] = v
			}
			req.Rows[i] = row
		}
	}
	if len(req.Rows) == 0 {
		writeError(w, http.StatusBadRequest, "\"rows\" is empty")
		return nil, nil, false
	}
	if len(req.Rows) > s.cfg.MaxRows {
		writeError(w, http.StatusRequestEntityTooLarge, "%d rows, the limit is %d", len(req.Rows), s.cfg.MaxRows)
		return nil, nil, false
	}
	x := make([]float32, 0, len(req.Rows)*cols)
	for i, row := range req.Rows {
		if len(row) != cols {
			writeError(w, http.StatusBadRequest, "row %d has %d columns, the model takes %d", i+1, len(row), cols)
			return nil, nil, false
		}
		for j, v := range row {
			if v == nil {
				writeError(w, http.StatusBadRequest, "row %d column %d is null", i+1, j+1)
				return nil, nil, false
			}
			f := float32(*v)
			if f-f != 0 {
				writeError(w, http.StatusBadRequest, "row %d column %d is %v, outside the float32 range", i+1, j+1, *v)
				return nil, nil, false
			}
			x = append(x, f)
		}
	}
	return x, nil, true
}

func chunk(x []float32, rows, cols int) [][]float32 {
	out := make([][]float32, rows)
	for i := range out {
		out[i] = x[i*cols : (i+1)*cols]
	}
	return out
}

type scoreResponse struct {
	Results []anomaly.Score `json:"results"`
	// Routed, for a fleet's group named in the path, says whether its
	// own model or the shared model answered.
	Routed  string `json:"routed,omitempty"`
	Caution string `json:"caution"`
}

// capability returns the served model as capability C, or answers 422
// naming what the request needs.
func capability[C any](w http.ResponseWriter, m *Loaded, what, needs string) (C, bool) {
	c, ok := m.Model.(C)
	if !ok {
		writeError(w, http.StatusUnprocessableEntity, "%s needs %s; the served model is of kind %q", what, needs, m.Kind())
	}
	return c, ok
}

// namedColumns returns a model's column names when they are names a
// client could send (a model trained on a file without a header has only
// c0, c1, ...), else nil.
func namedColumns(cols []string) []string {
	if len(cols) == 0 || cols[0] == "" || cols[0] == "c0" {
		return nil
	}
	return cols
}

// answerRows decodes a rows request for the served model, runs f on its
// rows and answers with f's result as JSON, or 400 with f's error.
func (s *Server) answerRows(w http.ResponseWriter, r *http.Request, m *Loaded, f func(x []float32, n int, req *rowsRequest, reads []rowRead) (any, error)) {
	var fields []string
	if enc := m.Model.Schema().Encoding; enc != nil {
		fields = enc.Names()
	}
	req, x, reads, ok := s.decodeRows(w, r, m.Model.Width(), namedColumns(m.Model.Schema().Columns), m.cells, fields)
	if !ok {
		return
	}
	v, err := f(x, len(req.Rows), req, reads)
	if err != nil {
		writeError(w, http.StatusBadRequest, "%v", err)
		return
	}
	writeJSON(w, http.StatusOK, v)
}

func (s *Server) score(w http.ResponseWriter, r *http.Request, m *Loaded) {
	sc, ok := scorer(w, m)
	if !ok {
		return
	}
	s.answerRows(w, r, m, func(x []float32, n int, req *rowsRequest, reads []rowRead) (any, error) {
		res, err := s.scoreRows(sc, x, n, req.Top, reads)
		if err != nil {
			return nil, err
		}
		return scoreResponse{Results: res, Routed: routedOf(r), Caution: anomaly.Caution}, nil
	})
}

// scorer returns m as a Scorer with a threshold, or answers 422.
func scorer(w http.ResponseWriter, m *Loaded) (model.Scorer, bool) {
	sc, ok := capability[model.Scorer](w, m, "scoring", "a model with anomaly scores (an autoencoder or a VAE)")
	if !ok {
		return nil, false
	}
	if sc.Calibrated() == nil {
		writeError(w, http.StatusUnprocessableEntity, "the model has no threshold (%s)", filepath.Base(m.Path))
		return nil, false
	}
	return sc, true
}

// scoreRows scores n rows x, marking what reading them found (reads),
// and counts them in the metrics.
func (s *Server) scoreRows(sc model.Scorer, x []float32, n, top int, reads []rowRead) ([]anomaly.Score, error) {
	if top <= 0 {
		top = 3
	}
	res, err := sc.Score(x, n, top)
	if err != nil {
		return nil, err
	}
	for i, rd := range reads {
		switch {
		case rd.unscorable && res[i].Unscorable == "":
			// never reported as normal: flagged, with no score
			res[i] = anomaly.Score{Value: math.NaN(), Threshold: res[i].Threshold, Anomaly: true, Unscorable: rd.text}
		case rd.text != "":
			res[i].Read = rd.text
			modelio.MarkMissing(&res[i], rd.text)
			if name := data.NoteUnseen(rd.text); name != "" && res[i].Unseen == "" {
				res[i].Unseen, res[i].Anomaly = name, true
			}
		}
	}
	flagged := 0
	for _, sc := range res {
		if sc.Anomaly {
			flagged++
		}
	}
	s.m.scored.Add(uint64(len(res)))
	s.m.flagged.Add(uint64(flagged))
	return res, nil
}

func (s *Server) encode(w http.ResponseWriter, r *http.Request, m *Loaded) {
	if enc, ok := capability[model.Encoder](w, m, "encoding", "a model with codes (an autoencoder or a VAE)"); ok {
		s.answerRows(w, r, m, func(x []float32, n int, _ *rowsRequest, reads []rowRead) (any, error) {
			codes, err := enc.Encode(x, n)
			if err != nil {
				return nil, err
			}
			return withRouted(r, withReads(map[string]any{"codes": chunk(codes, n, enc.CodeWidth())}, reads)), nil
		})
	}
}

func (s *Server) reconstruct(w http.ResponseWriter, r *http.Request, m *Loaded) {
	if rec, ok := capability[model.Reconstructor](w, m, "reconstruction", "an autoencoder or a VAE"); ok {
		s.answerRows(w, r, m, func(x []float32, n int, _ *rowsRequest, reads []rowRead) (any, error) {
			out, err := rec.Reconstruct(x, n)
			if err != nil {
				return nil, err
			}
			return withRouted(r, withReads(withRecords(map[string]any{"rows": chunk(out, n, m.Model.Width())}, m, out, n), reads)), nil
		})
	}
}

type sampleRequest struct {
	Count int     `json:"count"`
	Seed  *uint64 `json:"seed"`
	Class *int    `json:"class"`
}

func (s *Server) sample(w http.ResponseWriter, r *http.Request, m *Loaded) {
	smp, ok := capability[model.Sampler](w, m, "sampling", "a generative model (a VAE or a GAN)")
	if !ok {
		return
	}
	var req sampleRequest
	if !decodeJSON(w, r, &req) {
		return
	}
	if req.Count <= 0 || req.Count > s.cfg.MaxRows {
		writeError(w, http.StatusBadRequest, "\"count\" must be 1..%d", s.cfg.MaxRows)
		return
	}
	if req.Seed == nil {
		writeError(w, http.StatusBadRequest, "\"seed\" is required (samples are reproducible from it)")
		return
	}
	var out []float32
	var err error
	if req.Class != nil {
		cs, ok := m.Model.(model.ClassSampler)
		if !ok || cs.Classes() == 0 {
			writeError(w, http.StatusBadRequest, "\"class\" applies to conditional models only")
			return
		}
		out, err = cs.Generate(req.Count, *req.Seed, *req.Class)
	} else {
		out, err = smp.Sample(req.Count, *req.Seed)
	}
	if err != nil {
		writeError(w, http.StatusBadRequest, "%v", err)
		return
	}
	writeJSON(w, http.StatusOK, withRouted(r, withRecords(map[string]any{"rows": chunk(out, req.Count, m.Model.Width())}, m, out, req.Count)))
}

// Serve answers on ln until ctx ends, then stops accepting connections and
// waits (up to ShutdownTimeout) for requests in flight to finish.
func (s *Server) Serve(ctx context.Context, ln net.Listener) error {
	srv := &http.Server{
		Handler:           s,
		ReadTimeout:       s.cfg.ReadTimeout,
		ReadHeaderTimeout: s.cfg.ReadTimeout,
		WriteTimeout:      s.cfg.WriteTimeout,
		IdleTimeout:       s.cfg.IdleTimeout,
		ErrorLog:          slog.NewLogLogger(s.log.Handler(), slog.LevelWarn),
	}
	errc := make(chan error, 1)
	go func() { errc <- srv.Serve(ln) }()
	select {
	case err := <-errc:
		return err
	case <-ctx.Done():
	}
	s.draining.Store(true)
	if d := s.cfg.DrainDelay; d > 0 {
		s.log.Info("draining: /readyz answers 503 and connections close after their answer", "for", d.String())
		select {
		case <-time.After(d):
		case err := <-errc:
			return err
		}
	}
	s.log.Info("shutting down; waiting for requests in flight")
	sctx, cancel := context.WithTimeout(context.Background(), s.cfg.ShutdownTimeout)
	defer cancel()
	if err := srv.Shutdown(sctx); err != nil {
		return fmt.Errorf("serve: shutdown: %w", err)
	}
	if err := <-errc; err != nil && !errors.Is(err, http.ErrServerClosed) {
		return err
	}
	return nil
}

// withReads adds to a response, when reading records found anything,
// "read": for each record what was found ("" when nothing).
func withReads(v map[string]any, reads []rowRead) map[string]any {
	if reads != nil {
		texts := make([]string, len(reads))
		for i, rd := range reads {
			texts[i] = rd.text
		}
		v["read"] = texts
	}
	return v
}

// cellText turns a record's JSON value into a cell's text: a string as it
// is, a number in its shortest form, a boolean as true or false, null as
// an empty (missing) cell.
func cellText(raw json.RawMessage) (string, error) {
	var v any
	if err := json.Unmarshal(raw, &v); err != nil {
		return "", err
	}
	switch t := v.(type) {
	case nil:
		return "", nil
	case string:
		return t, nil
	case float64:
		return strconv.FormatFloat(t, 'g', -1, 64), nil
	case bool:
		return strconv.FormatBool(t), nil
	}
	return "", fmt.Errorf("not a text, a number, a boolean or null")
}

// withRecords adds to a response of rows, for a model of a table read by
// type, "records": the rows as the table's cells keyed by column name
// (levels, texts, numbers kept within their training ranges, "" for a
// missing cell; data.Encoding.Decode).
func withRecords(v map[string]any, m *Loaded, x []float32, n int) map[string]any {
	enc := m.Model.Schema().Encoding
	if enc == nil || enc.Width() != m.Model.Width() {
		return v
	}
	names := enc.Names()
	w := m.Model.Width()
	recs := make([]map[string]string, n)
	var cells []string
	for r := range recs {
		cells = enc.Decode(cells[:0], x[r*w:(r+1)*w])
		recs[r] = make(map[string]string, len(names))
		for j, name := range names {
			recs[r][name] = cells[j]
		}
	}
	v["records"] = recs
	return v
}
