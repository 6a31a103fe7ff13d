package anomaly

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/stat/distuv"
)

// Caution is printed wherever a score drives a decision.
const Caution = "Caution: anomaly scores are a decision aid, calibrated only for data like the training data; review flagged records before acting on them."

// ErrConfig is wrapped by configuration errors.
var ErrConfig = errors.New("anomaly: invalid configuration")

// Method chooses how a threshold is set from scores of normal data.
type Method string

const (
	// Quantile sets the threshold at the ceil((n+1)(1-a))-th smallest
	// calibration score for a target false-alarm rate a. For a new score
	// exchangeable with the calibration scores, the chance that it exceeds
	// the threshold is then at most a (split-conformal bound; with distinct
	// scores it is exactly 1 - k/(n+1)).
	Quantile Method = "quantile"
	// Max sets the threshold at the largest calibration score, for an
	// expected false-alarm rate of 1/(n+1).
	Max Method = "max"
)

// Config configures Calibrate. Zero fields mean the Quantile method with a
// target false-alarm rate of 1%.
type Config struct {
	Method     Method
	FalseAlarm float64
}

// BoundConfidence is the confidence of Threshold.FalseAlarmBound.
const BoundConfidence = 0.95

// MinCalibrationRows is the fewest calibration rows below which
// Calibrate's callers warn: with fewer, the false-alarm bound of a 1%
// target is above 4% (the bound of the largest of 70 scores is 4.2%).
const MinCalibrationRows = 70

// Threshold is a calibrated decision threshold: a score above Value is
// flagged. ExpectedFalseAlarm is the rate at which normal data like the
// calibration data would be flagged, on average over calibration sets;
// FalseAlarmBound is the rate that, with probability BoundConfidence over
// the calibration rows, the threshold's actual false-alarm rate does not
// exceed. For the k-th smallest of n calibration scores that rate follows
// a Beta(n+1-k, k) distribution (the calibration-conditional guarantee
// of split-conformal methods: Vovk, "Conditional validity of inductive
// conformal predictors", Asian Conference on Machine Learning, 2012), so
// the bound is its BoundConfidence quantile. It marshals as JSON.
type Threshold struct {
	Value              float64 `json:"value"`
	Method             Method  `json:"method"`
	TargetFalseAlarm   float64 `json:"target_false_alarm,omitempty"`
	ExpectedFalseAlarm float64 `json:"expected_false_alarm"`
	FalseAlarmBound    float64 `json:"false_alarm_bound,omitempty"`
	Rows               int     `json:"calibration_rows"`
	// CrossFitted says the calibration scores came from models that had
	// not seen their rows (cross-fitting), not from held-out rows of the
	// model itself.
	CrossFitted bool `json:"cross_fitted,omitempty"`
}

// falseAlarmBound is the BoundConfidence quantile of Beta(n+1-k, k): the
// bound on the false-alarm rate of a threshold at the k-th smallest of n
// calibration scores.
func falseAlarmBound(n, k int) float64 {
	return distuv.Beta{Alpha: float64(n + 1 - k), Beta: float64(k)}.Quantile(BoundConfidence)
}

// Flag reports whether score exceeds the threshold.
func (t Threshold) Flag(score float64) bool { return score > t.Value }

// Calibrate sets a threshold from scores of held-out normal data (data not
// used for training).
func Calibrate(scores []float64, c Config) (Threshold, error) {
	if c.Method == "" {
		c.Method = Quantile
	}
	if c.FalseAlarm == 0 {
		c.FalseAlarm = 0.01
	}
	n := len(scores)
	if n == 0 {
		return Threshold{}, fmt.Errorf("anomaly: no calibration scores")
	}
	for i, s := range scores {
		if math.IsNaN(s) || math.IsInf(s, 0) {
			return Threshold{}, fmt.Errorf("anomaly: calibration score %d is %v", i, s)
		}
	}
	s := append([]float64(nil), scores...)
	sort.Float64s(s)
	switch c.Method {
	case Max:
		return Threshold{Value: s[n-1], Method: Max, ExpectedFalseAlarm: 1 / float64(n+1), FalseAlarmBound: falseAlarmBound(n, n), Rows: n}, nil
	case Quantile:
		a := c.FalseAlarm
		if !(a > 0 && a < 1) {
			return Threshold{}, fmt.Errorf("%w: false-alarm rate %v outside (0, 1)", ErrConfig, a)
		}
		k := int(math.Ceil(float64(n+1) * (1 - a)))
		if k > n {
			return Threshold{}, fmt.Errorf("anomaly: a false-alarm rate of %v needs at least %d calibration rows, got %d", a, int(math.Ceil(1/a))-1, n)
		}
		k = max(k, 1)
		return Threshold{Value: s[k-1], Method: Quantile, TargetFalseAlarm: a, ExpectedFalseAlarm: 1 - float64(k)/float64(n+1), FalseAlarmBound: falseAlarmBound(n, k), Rows: n}, nil
	}
	return Threshold{}, fmt.Errorf("%w: unknown method %q", ErrConfig, c.Method)
}

func checkLabels(scores []float64, positive []bool) (np, nn int, err error) {
	if len(scores) != len(positive) {
		return 0, 0, fmt.Errorf("anomaly: %d scores but %d labels", len(scores), len(positive))
	}
	for i, p := range positive {
		if math.IsNaN(scores[i]) {
			return 0, 0, fmt.Errorf("anomaly: score %d is NaN", i)
		}
		if p {
			np++
		} else {
			nn++
		}
	}
	return np, nn, nil
}

// ROCAUC is the area under the ROC curve of scores for telling positive
// (anomalous) rows from the rest: the probability that a random positive
// scores above a random negative, ties counting one half (the Mann-Whitney
// U statistic divided by n_pos*n_neg).
func ROCAUC(scores []float64, positive []bool) (float64, error) {
	np, nn, err := checkLabels(scores, positive)
	if err != nil {
		return 0, err
	}
	if np == 0 || nn == 0 {
		return 0, fmt.Errorf("anomaly: ROC AUC needs both classes (%d positive, %d negative)", np, nn)
	}
	idx := make([]int, len(scores))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, b int) bool { return scores[idx[a]] < scores[idx[b]] })
	// mid-ranks, then U = R_pos - np(np+1)/2
	var rpos float64
	for i := 0; i < len(idx); {
		j := i
		for j < len(idx) && scores[idx[j]] == scores[idx[i]] {
			j++
		}
		mid := float64(i+j+1) / 2 // ranks i+1..j
		for k := i; k < j; k++ {
			if positive[idx[k]] {
				rpos += mid
			}
		}
		i = j
	}
	u := rpos - float64(np)*float64(np+1)/2
	return u / (float64(np) * float64(nn)), nil
}

// PrecisionRecall returns the precision and recall of flagging rows whose
// score exceeds threshold. Precision is NaN when nothing is flagged.
func PrecisionRecall(scores []float64, positive []bool, threshold float64) (precision, recall float64, err error) {
	np, _, err := checkLabels(scores, positive)
	if err != nil {
		return 0, 0, err
	}
	var tp, fp int
	for i, s := range scores {
		if s > threshold {
			if positive[i] {
				tp++
			} else {
				fp++
			}
		}
	}
	precision = math.NaN()
	if tp+fp > 0 {
		precision = float64(tp) / float64(tp+fp)
	}
	recall = math.NaN()
	if np > 0 {
		recall = float64(tp) / float64(np)
	}
	return precision, recall, nil
}

// CalibrateRows scores held-out normal rows with score and returns the
// threshold Calibrate finds for the scores: the common part of the
// Calibrate methods of the models with anomaly scores.
func CalibrateRows(score func(x []float32, rows int) ([]float64, error), normal []float32, rows int, c Config) (Threshold, error) {
	s, err := score(normal, rows)
	if err != nil {
		return Threshold{}, err
	}
	return Calibrate(s, c)
}
