package anomaly

import (
	"encoding/json"
	"math"
	"sort"
)

// Feature is one column's part in a row's score.
type Feature struct {
	Column int     `json:"column"`
	Name   string  `json:"name,omitempty"`
	Share  float64 `json:"share"` // fraction of the row's total contribution
}

// Score is one row's anomaly assessment.
type Score struct {
	Value     float64   `json:"score"`
	Threshold float64   `json:"threshold"`
	Anomaly   bool      `json:"anomaly"`
	Top       []Feature `json:"top_features"`
	// Unscorable, when set, says why the row has no score: a value or an
	// intermediate result outside the range the model can represent. Such
	// a row is flagged (Anomaly is true), never reported as normal.
	Unscorable string `json:"unscorable,omitempty"`
}

// NotFinite is the reason Assess gives for a row whose score or
// contributions are NaN or infinite.
const NotFinite = "the row is outside the range the model can represent (its score is not a finite number)"

// MarshalJSON writes a Score, with a null score for an unscorable row
// (JSON has no NaN or infinity).
func (s Score) MarshalJSON() ([]byte, error) {
	type plain Score
	if finite(s.Value) {
		return json.Marshal(plain(s))
	}
	return json.Marshal(struct {
		plain
		Value *float64 `json:"score"`
	}{plain: plain(s)})
}

// Assess turns one row's score and per-column contributions into a Score
// against t, naming the top columns (largest contributions first, ties by
// column order). names, when long enough, labels the columns. A row whose
// score or contributions are not finite is unscorable: flagged, with the
// reason and no columns.
func Assess(value float64, contrib []float64, names []string, top int, t Threshold) Score {
	s := Score{Value: value, Threshold: t.Value, Anomaly: t.Flag(value)}
	if !finite(value) || !allFinite(contrib) {
		s.Anomaly, s.Unscorable = true, NotFinite
		return s
	}
	top = min(top, len(contrib))
	if top <= 0 {
		return s
	}
	var total float64
	idx := make([]int, len(contrib))
	for j, v := range contrib {
		idx[j] = j
		total += v
	}
	sort.SliceStable(idx, func(a, b int) bool { return contrib[idx[a]] > contrib[idx[b]] })
	for _, j := range idx[:top] {
		f := Feature{Column: j}
		if total > 0 {
			f.Share = contrib[j] / total
		}
		if j < len(names) {
			f.Name = names[j]
		}
		s.Top = append(s.Top, f)
	}
	return s
}

// AssessRows assesses rows at once: scores[r] is row r's score and
// contrib[r*cols:(r+1)*cols] its columns' contributions; each row gets
// Assess's verdict and its top columns.
func AssessRows(scores, contrib []float64, cols int, names []string, top int, t Threshold) []Score {
	out := make([]Score, len(scores))
	for r := range out {
		out[r] = Assess(scores[r], contrib[r*cols:(r+1)*cols], names, top, t)
	}
	return out
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func allFinite(v []float64) bool {
	for _, x := range v {
		if !finite(x) {
			return false
		}
	}
	return true
}
