package serve

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"strings"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/fleet"
	"github.com/quernlab/quern/model"
)

// Where a fleet's row went, as answers ("routed") and metrics say it.
const (
	routedOwn    = "own"
	routedShared = "shared"
)

// single adapts a handler of one model to the served model.
func (s *Server) single(h func(http.ResponseWriter, *http.Request, *Loaded)) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) { h(w, r, s.Model()) }
}

// fleetRoutes are the routes of a fleet: records routed by their group
// column (score, encode), any route with the group in the path, and
// reloads of the whole fleet or one member.
func (s *Server) fleetRoutes() {
	s.mux.HandleFunc("/v1/score", only("POST", s.fleetScore))
	s.mux.HandleFunc("/v1/encode", only("POST", s.fleetEncode))
	for _, op := range []string{"reconstruct", "sample"} {
		s.mux.HandleFunc("/v1/"+op, func(w http.ResponseWriter, r *http.Request) {
			writeError(w, http.StatusBadRequest, "this server serves a fleet by %s: name the group in the path, POST /v1/groups/{%s}/%s", s.fleet.Index().GroupColumn, s.fleet.Index().GroupColumn, op)
		})
	}
	s.mux.HandleFunc("/v1/groups/{group}/{op}", only("POST", s.groupRoute))
	s.mux.HandleFunc("/admin/reload", only("POST", func(w http.ResponseWriter, r *http.Request) {
		q := r.URL.Query()
		for k := range q {
			if k != "group" && k != "shared" {
				writeError(w, http.StatusBadRequest, "unknown parameter %q: /admin/reload takes ?group=G (one member), ?shared=true (the shared model) or nothing (every file that changed)", k)
				return
			}
		}
		group, shared := q.Get("group"), q.Get("shared") == "true" || q.Get("shared") == "1"
		switch {
		case q.Has("group") && group == "":
			writeError(w, http.StatusBadRequest, "?group= names no group")
			return
		case q.Has("shared") && !shared && q.Get("shared") != "false" && q.Get("shared") != "0":
			writeError(w, http.StatusBadRequest, "?shared=%s: want true or false", q.Get("shared"))
			return
		case group != "" && shared:
			writeError(w, http.StatusBadRequest, "?group and ?shared=true: reload one member or the shared model, not both at once")
			return
		}
		got, err := s.reloadFleet(group, shared)
		if err != nil {
			writeError(w, http.StatusUnprocessableEntity, "reload refused, the fleet kept as it was: %v", err)
			return
		}
		writeJSON(w, http.StatusOK, map[string]any{"status": "reloaded", "opened": got.Opened, "kept": got.Kept, "removed": got.Removed, "models": s.fleet.Len(), "shared": s.fleet.Shared() != nil})
	}))
	s.common("POST /v1/score and /v1/encode (records with the group column), /v1/groups/{group}/score, .../encode, .../reconstruct, .../sample, /admin/reload[?group=G|?shared=true]")
}

// reloadFleet reloads the whole fleet (the files that changed), one
// member, or the shared model, counting the outcome.
func (s *Server) reloadFleet(group string, shared bool) (fleet.Reloaded, error) {
	got, err := s.fleet.Reload(group, shared)
	if err != nil {
		s.m.failures.Add(1)
		s.log.Error("reload refused; keeping the fleet as it was", "fleet", s.cfg.FleetPath, "group", group, "error", err.Error())
		return got, err
	}
	s.m.reloads.Add(1)
	s.log.Info("fleet reloaded", "fleet", s.cfg.FleetPath, "group", group, "opened", got.Opened, "kept", got.Kept, "removed", got.Removed)
	return got, nil
}

// groupText is a record's group cell as the training file's text would
// be: a string trimmed, a number as written (1234567, not 1.234567e+06;
// 7.0 stays 7.0), a boolean as true or false, null as no group.
func groupText(raw json.RawMessage) (string, error) {
	t := strings.TrimSpace(string(raw))
	if len(t) > 0 && (t[0] == '-' || t[0] >= '0' && t[0] <= '9') {
		var n json.Number
		if err := json.Unmarshal(raw, &n); err != nil {
			return "", err
		}
		return n.String(), nil
	}
	s, err := cellText(raw)
	return strings.TrimSpace(s), err
}

// route finds a group's model, or answers 404 when the fleet has neither
// one for it nor a shared model.
func (s *Server) route(w http.ResponseWriter, group, where string) (*fleet.Entry[*Loaded], string, bool) {
	e, shared, ok := s.fleet.Route(group)
	if !ok {
		s.m.refused.Add(1)
		writeError(w, http.StatusNotFound, "no model for %s %q%s: the fleet has none of its own for it and no shared model (train with -shared N for one)", s.fleet.Index().GroupColumn, group, where)
		return nil, "", false
	}
	if shared {
		return e, routedShared, true
	}
	return e, routedOwn, true
}

// groupRoute answers POST /v1/groups/{group}/{op} with the group's model
// (or the shared model), as a one-model server would.
func (s *Server) groupRoute(w http.ResponseWriter, r *http.Request) {
	group, op := r.PathValue("group"), r.PathValue("op")
	h := map[string]func(http.ResponseWriter, *http.Request, *Loaded){"score": s.score, "encode": s.encode, "reconstruct": s.reconstruct, "sample": s.sample}[op]
	if h == nil {
		writeError(w, http.StatusNotFound, "no route %s: a group's routes are score, encode, reconstruct and sample", r.URL.Path)
		return
	}
	e, routed, ok := s.route(w, group, "")
	if !ok {
		return
	}
	w.Header().Set("Quern-Routed", routed)
	rec := &recorder{ResponseWriter: w, code: http.StatusOK}
	ctx := context.WithValue(r.Context(), routedKey{}, routed)
	ctx = context.WithValue(ctx, pathGroupKey{}, pathGroup{column: s.fleet.Index().GroupColumn, group: group})
	h(rec, r.WithContext(ctx), e.Value)
	if rec.code == http.StatusOK {
		s.m.routed(routed, 1) // answered, not refused
	}
}

// routedKey carries, in a request's context, where a fleet's path route
// sent it.
type routedKey struct{}

// pathGroupKey carries the group a fleet's path names and its column.
type pathGroupKey struct{}

type pathGroup struct{ column, group string }

// routedOf is where a fleet's path route sent r ("" for a one-model
// server's request).
func routedOf(r *http.Request) string {
	v, _ := r.Context().Value(routedKey{}).(string)
	return v
}

// withRouted adds "routed" to an answer of a fleet's path route.
func withRouted(r *http.Request, v map[string]any) map[string]any {
	if to := routedOf(r); to != "" {
		v["routed"] = to
	}
	return v
}

// splitRecords reads a fleet request's records and deals them to their
// groups' models, in the order each model is first met.
func (s *Server) splitRecords(w http.ResponseWriter, r *http.Request) (*rowsRequest, []*fleet.Batch[*Loaded], bool) {
	var req rowsRequest
	if !decodeJSON(w, r, &req) {
		return nil, nil, false
	}
	col := s.fleet.Index().GroupColumn
	switch {
	case req.Rows != nil:
		writeError(w, http.StatusBadRequest, "a fleet routes each record by its %q: send \"records\" (objects keyed by column name), or POST /v1/groups/{%s}/... with rows", col, col)
		return nil, nil, false
	case len(req.Records) == 0:
		writeError(w, http.StatusBadRequest, "\"records\" is empty")
		return nil, nil, false
	case len(req.Records) > s.cfg.MaxRows:
		writeError(w, http.StatusRequestEntityTooLarge, "%d records, the limit is %d", len(req.Records), s.cfg.MaxRows)
		return nil, nil, false
	}
	keys := make([]string, len(req.Records))
	for i, rec := range req.Records {
		raw, ok := rec[col]
		if !ok {
			writeError(w, http.StatusBadRequest, "record %d has no %q, the column that picks its model", i+1, col)
			return nil, nil, false
		}
		g, err := groupText(raw)
		if err != nil {
			writeError(w, http.StatusBadRequest, "record %d: %q is %s: %v", i+1, col, raw, err)
			return nil, nil, false
		}
		keys[i] = g
	}
	batches, none := s.fleet.Deal(len(keys), func(i int) string { return keys[i] })
	if len(none) > 0 {
		s.m.refused.Add(1)
		writeError(w, http.StatusNotFound, "no model for %s %q (record %d): the fleet has none of its own for it and no shared model (train with -shared N for one)", col, keys[none[0]], none[0]+1)
		return nil, nil, false
	}
	return &req, batches, true
}

// routedName says where a batch went, as answers and metrics say it.
func routedName[T any](b *fleet.Batch[T]) string {
	if b.Shared {
		return routedShared
	}
	return routedOwn
}

// fleetRows runs f on each batch's rows, read by its model, after
// checking every model can (need); the answers' rows come back in the
// request's order with, for each, where it was routed.
func (s *Server) fleetRows(w http.ResponseWriter, r *http.Request, need func(http.ResponseWriter, *Loaded) bool, f func(m *Loaded, x []float32, n int, req *rowsRequest, reads []rowRead, put func(k int, v any)) error) ([]any, []string, []string, bool) {
	req, batches, ok := s.splitRecords(w, r)
	if !ok {
		return nil, nil, nil, false
	}
	out := make([]any, len(req.Records))
	routed := make([]string, len(req.Records))
	var read []string
	for _, b := range batches {
		m := b.Entry.Value
		if !need(w, m) {
			return nil, nil, nil, false
		}
		sub := &rowsRequest{Records: make([]map[string]json.RawMessage, len(b.Rows)), Top: req.Top}
		for k, i := range b.Rows {
			sub.Records[k] = req.Records[i]
		}
		var fields []string
		if enc := m.Model.Schema().Encoding; enc != nil {
			fields = enc.Names()
		}
		x, reads, ok := s.readRows(w, sub, m.Model.Width(), namedColumns(m.Model.Schema().Columns), m.cells, fields, b.Rows)
		if !ok {
			return nil, nil, nil, false
		}
		if reads != nil && read == nil {
			read = make([]string, len(req.Records))
		}
		for k, rd := range reads {
			read[b.Rows[k]] = rd.text
		}
		err := f(m, x, len(b.Rows), sub, reads, func(k int, v any) { out[b.Rows[k]] = v })
		if err != nil {
			writeError(w, http.StatusBadRequest, "%s %q: %v", s.fleet.Index().GroupColumn, b.Entry.Group, err)
			return nil, nil, nil, false
		}
		for _, i := range b.Rows {
			routed[i] = routedName(b)
		}
	}
	for _, b := range batches {
		s.m.routed(routedName(b), len(b.Rows))
	}
	return out, routed, read, true
}

type fleetScoreResponse struct {
	Results []anomaly.Score `json:"results"`
	// Routed says, for each record, whether its group's own model or the
	// shared model scored it.
	Routed  []string `json:"routed"`
	Caution string   `json:"caution"`
}

// fleetScore scores each record with its group's model.
func (s *Server) fleetScore(w http.ResponseWriter, r *http.Request) {
	need := func(w http.ResponseWriter, m *Loaded) bool { _, ok := scorer(w, m); return ok }
	out, routed, _, ok := s.fleetRows(w, r, need, func(m *Loaded, x []float32, n int, req *rowsRequest, reads []rowRead, put func(int, any)) error {
		res, err := s.scoreRows(m.Model.(model.Scorer), x, n, req.Top, reads)
		for k := range res {
			put(k, res[k])
		}
		return err
	})
	if !ok {
		return
	}
	res := make([]anomaly.Score, len(out))
	for i, v := range out {
		res[i] = v.(anomaly.Score)
	}
	writeJSON(w, http.StatusOK, fleetScoreResponse{Results: res, Routed: routed, Caution: anomaly.Caution})
}

// fleetEncode writes each record's code by its group's model.
func (s *Server) fleetEncode(w http.ResponseWriter, r *http.Request) {
	need := func(w http.ResponseWriter, m *Loaded) bool {
		_, ok := capability[model.Encoder](w, m, "encoding", "a model with codes (an autoencoder or a VAE)")
		return ok
	}
	out, routed, read, ok := s.fleetRows(w, r, need, func(m *Loaded, x []float32, n int, _ *rowsRequest, _ []rowRead, put func(int, any)) error {
		enc := m.Model.(model.Encoder)
		codes, err := enc.Encode(x, n)
		if err != nil {
			return err
		}
		for k, c := range chunk(codes, n, enc.CodeWidth()) {
			put(k, c)
		}
		return nil
	})
	if !ok {
		return
	}
	v := map[string]any{"codes": out, "routed": routed}
	if read != nil {
		v["read"] = read
	}
	writeJSON(w, http.StatusOK, v)
}

// writeFleet adds the fleet's metrics: its size and where rows went.
// No label names a group, so a fleet of any size adds the same few
// series.
func (m *metrics) writeFleet(w io.Writer, models int, shared bool) {
	fmt.Fprintln(w, "# HELP quern_fleet_models Models of the served fleet, the shared model not counted.")
	fmt.Fprintln(w, "# TYPE quern_fleet_models gauge")
	fmt.Fprintf(w, "quern_fleet_models %d\n", models)
	fmt.Fprintln(w, "# HELP quern_fleet_shared_model Whether the fleet has a shared model (1) or not (0).")
	fmt.Fprintln(w, "# TYPE quern_fleet_shared_model gauge")
	fmt.Fprintf(w, "quern_fleet_shared_model %d\n", map[bool]int{true: 1, false: 0}[shared])
	fmt.Fprintln(w, "# HELP quern_fleet_routed_total Records routed by their group column, and requests routed by the group in their path, answered by the group's own model or by the shared model.")
	fmt.Fprintln(w, "# TYPE quern_fleet_routed_total counter")
	for _, to := range []string{routedOwn, routedShared} {
		fmt.Fprintf(w, "quern_fleet_routed_total{to=%q} %d\n", to, m.routedRows[to].Load())
	}
	fmt.Fprintln(w, "# HELP quern_fleet_refused_total Requests refused for a group with no model and no shared model.")
	fmt.Fprintln(w, "# TYPE quern_fleet_refused_total counter")
	fmt.Fprintf(w, "quern_fleet_refused_total %d\n", m.refused.Load())
}

func (m *metrics) routed(to string, n int) {
	if c, ok := m.routedRows[to]; ok {
		c.Add(uint64(n))
	}
}
