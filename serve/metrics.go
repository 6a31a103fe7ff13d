package serve

import (
	"fmt"
	"io"
	"math"
	"sort"
	"sync"
	"sync/atomic"
	"time"
)

// latencyBuckets are the upper bounds, in seconds, of the request latency
// histogram.
var latencyBuckets = []float64{0.00005, 0.0001, 0.00025, 0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5}

type routeKey struct {
	route string
	code  int
}

// metrics counts what the server does, for the Prometheus text format.
type metrics struct {
	mu       sync.Mutex
	requests map[routeKey]uint64
	buckets  map[string][]uint64 // per route, cumulative counts by bucket
	sums     map[string]float64
	counts   map[string]uint64
	scored   atomic.Uint64
	flagged  atomic.Uint64
	reloads  atomic.Uint64
	failures atomic.Uint64
	inflight atomic.Int64
	// a fleet's rows by where they went ("own", "shared"), and requests
	// refused for a group with no model
	routedRows map[string]*atomic.Uint64
	refused    atomic.Uint64
}

func newMetrics() *metrics {
	return &metrics{requests: map[routeKey]uint64{}, buckets: map[string][]uint64{}, sums: map[string]float64{}, counts: map[string]uint64{},
		routedRows: map[string]*atomic.Uint64{routedOwn: new(atomic.Uint64), routedShared: new(atomic.Uint64)}}
}

func (m *metrics) observe(route string, code int, d time.Duration) {
	s := d.Seconds()
	m.mu.Lock()
	defer m.mu.Unlock()
	m.requests[routeKey{route, code}]++
	b := m.buckets[route]
	if b == nil {
		b = make([]uint64, len(latencyBuckets))
		m.buckets[route] = b
	}
	for i, ub := range latencyBuckets {
		if s <= ub {
			b[i]++
		}
	}
	m.sums[route] += s
	m.counts[route]++
}

func fmtFloat(v float64) string {
	if math.IsInf(v, 1) {
		return "+Inf"
	}
	return fmt.Sprintf("%g", v)
}

// write renders the metrics in the Prometheus text exposition format
// (version 0.0.4).
func (m *metrics) write(w io.Writer, modelKind string, loaded time.Time) {
	m.mu.Lock()
	defer m.mu.Unlock()
	fmt.Fprintln(w, "# HELP quern_requests_total HTTP requests by route and status code.")
	fmt.Fprintln(w, "# TYPE quern_requests_total counter")
	keys := make([]routeKey, 0, len(m.requests))
	for k := range m.requests {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(a, b int) bool {
		if keys[a].route != keys[b].route {
			return keys[a].route < keys[b].route
		}
		return keys[a].code < keys[b].code
	})
	var errs uint64
	for _, k := range keys {
		fmt.Fprintf(w, "quern_requests_total{route=%q,code=\"%d\"} %d\n", k.route, k.code, m.requests[k])
		if k.code >= 400 {
			errs += m.requests[k]
		}
	}
	fmt.Fprintln(w, "# HELP quern_request_errors_total HTTP requests answered with a 4xx or 5xx status.")
	fmt.Fprintln(w, "# TYPE quern_request_errors_total counter")
	fmt.Fprintf(w, "quern_request_errors_total %d\n", errs)
	fmt.Fprintln(w, "# HELP quern_request_duration_seconds Request latency by route.")
	fmt.Fprintln(w, "# TYPE quern_request_duration_seconds histogram")
	routes := make([]string, 0, len(m.buckets))
	for r := range m.buckets {
		routes = append(routes, r)
	}
	sort.Strings(routes)
	for _, r := range routes {
		for i, ub := range latencyBuckets {
			fmt.Fprintf(w, "quern_request_duration_seconds_bucket{route=%q,le=%q} %d\n", r, fmtFloat(ub), m.buckets[r][i])
		}
		fmt.Fprintf(w, "quern_request_duration_seconds_bucket{route=%q,le=\"+Inf\"} %d\n", r, m.counts[r])
		fmt.Fprintf(w, "quern_request_duration_seconds_sum{route=%q} %g\n", r, m.sums[r])
		fmt.Fprintf(w, "quern_request_duration_seconds_count{route=%q} %d\n", r, m.counts[r])
	}
	scored, flagged := m.scored.Load(), m.flagged.Load()
	fmt.Fprintln(w, "# HELP quern_rows_scored_total Rows scored for anomalies.")
	fmt.Fprintln(w, "# TYPE quern_rows_scored_total counter")
	fmt.Fprintf(w, "quern_rows_scored_total %d\n", scored)
	fmt.Fprintln(w, "# HELP quern_rows_flagged_total Scored rows above the threshold.")
	fmt.Fprintln(w, "# TYPE quern_rows_flagged_total counter")
	fmt.Fprintf(w, "quern_rows_flagged_total %d\n", flagged)
	rate := 0.0
	if scored > 0 {
		rate = float64(flagged) / float64(scored)
	}
	fmt.Fprintln(w, "# HELP quern_anomaly_rate Fraction of scored rows flagged since start.")
	fmt.Fprintln(w, "# TYPE quern_anomaly_rate gauge")
	fmt.Fprintf(w, "quern_anomaly_rate %g\n", rate)
	fmt.Fprintln(w, "# HELP quern_requests_in_flight Requests being served.")
	fmt.Fprintln(w, "# TYPE quern_requests_in_flight gauge")
	fmt.Fprintf(w, "quern_requests_in_flight %d\n", m.inflight.Load())
	fmt.Fprintln(w, "# HELP quern_model_reloads_total Successful and refused model reloads.")
	fmt.Fprintln(w, "# TYPE quern_model_reloads_total counter")
	fmt.Fprintf(w, "quern_model_reloads_total{result=\"ok\"} %d\n", m.reloads.Load())
	fmt.Fprintf(w, "quern_model_reloads_total{result=\"refused\"} %d\n", m.failures.Load())
	fmt.Fprintln(w, "# HELP quern_model_loaded_timestamp_seconds When the serving model was loaded.")
	fmt.Fprintln(w, "# TYPE quern_model_loaded_timestamp_seconds gauge")
	fmt.Fprintf(w, "quern_model_loaded_timestamp_seconds{kind=%q} %d\n", modelKind, loaded.Unix())
}
