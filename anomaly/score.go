package anomaly

import (
	"encoding/json"
	"math"
)

// Feature is one column's part in a row's score.
type Feature struct {
	Column int    `json:"column"`
	Name   string `json:"name,omitempty"`
	// Share is the column's fraction of the row's positive
	// contributions, in [0, 1]. A column's contribution can be negative
	// under a profile's full covariance (its deviation is one another
	// column's makes expected): it raises nothing and has no share.
	Share float64 `json:"share"`
	// Expected is what the model expected of the column: its
	// reconstruction (a number), or the level (category) or text
	// (boolean) it reconstructs most. Empty when unknown.
	Expected string `json:"expected,omitempty"`
	// Direction says how the row's value stands to Expected: "above" or
	// "below" for a number, "other" for a category or boolean whose
	// value is not the expected one, "missing" for a missing cell.
	Direction string `json:"direction,omitempty"`
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
	// Unseen, when set, names a category column whose level the model
	// never saw in training: as surprising as a category can be, the row
	// is flagged (Anomaly) whatever its score.
	Unseen string `json:"unseen,omitempty"`
	// Read, when set, says what reading the row's cells found: a missing
	// cell filled in, a text where a number belongs, a level not seen in
	// training (data.RowNote).
	Read string `json:"read,omitempty"`
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
	if !finite(value) {
		s.Anomaly, s.Unscorable = true, NotFinite
		return s
	}
	top = max(0, min(top, len(contrib)))
	// one pass: the total, the finite check and the top columns by partial
	// selection (a sorted list of at most top entries; a column displaces
	// one only when strictly larger, so ties keep column order)
	var best [8]int
	idx := best[:0]
	if top > len(best) {
		idx = make([]int, 0, top)
	}
	var total float64
	for j, v := range contrib {
		if !finite(v) {
			s.Anomaly, s.Unscorable = true, NotFinite
			return s
		}
		if v > 0 {
			total += v
		}
		if top == 0 || (len(idx) == top && v <= contrib[idx[top-1]]) {
			continue
		}
		k := len(idx)
		if k < top {
			idx = append(idx, j)
		} else {
			k = top - 1
		}
		for k > 0 && v > contrib[idx[k-1]] {
			idx[k] = idx[k-1]
			k--
		}
		idx[k] = j
	}
	if top == 0 {
		return s
	}
	s.Top = make([]Feature, len(idx))
	for i, j := range idx {
		f := Feature{Column: j}
		if total > 0 {
			f.Share = max(contrib[j], 0) / total
		}
		if j < len(names) {
			f.Name = names[j]
		}
		s.Top[i] = f
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

// AssessGrouped is AssessRows for inputs that come in groups (the
// one-hot inputs of a categorical column, a column and its missing-cell
// indicator): owner[j] is the index in names of input j's group, and a
// group's contribution is the sum of its inputs'. The top features are
// then groups. A nil owner is AssessRows.
func AssessGrouped(scores, contrib []float64, cols int, owner []int, names []string, top int, t Threshold) []Score {
	if owner == nil {
		return AssessRows(scores, contrib, cols, names, top, t)
	}
	out := make([]Score, len(scores))
	g := make([]float64, len(names))
	for r := range out {
		clear(g)
		for j, v := range contrib[r*cols : (r+1)*cols] {
			g[owner[j]] += v
		}
		out[r] = Assess(scores[r], g, names, top, t)
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
