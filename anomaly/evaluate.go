package anomaly

import (
	"fmt"
	"math"
	"sort"
)

// Point is one point of a curve: X and Y, and the score threshold that
// gives it (rows scoring above it are flagged).
type Point struct{ X, Y, Threshold float64 }

// Counts are a threshold's confusion counts: flagged anomalous rows (TP),
// flagged normal rows (FP), normal rows let pass (TN), anomalous rows
// missed (FN).
type Counts struct{ TP, FP, TN, FN int }

// CountsAt flags rows scoring above threshold and counts the outcomes.
func CountsAt(scores []float64, positive []bool, threshold float64) (Counts, error) {
	if _, _, err := checkLabels(scores, positive); err != nil {
		return Counts{}, err
	}
	var c Counts
	for i, s := range scores {
		switch flagged := s > threshold; {
		case flagged && positive[i]:
			c.TP++
		case flagged:
			c.FP++
		case positive[i]:
			c.FN++
		default:
			c.TN++
		}
	}
	return c, nil
}

// Precision, Recall, F1 and FalseAlarmRate follow their usual definitions;
// each is NaN when its denominator is zero.
func (c Counts) Precision() float64 { return ratio(c.TP, c.TP+c.FP) }

// Recall is TP / (TP + FN).
func (c Counts) Recall() float64 { return ratio(c.TP, c.TP+c.FN) }

// F1 is the harmonic mean of precision and recall, 2TP / (2TP + FP + FN).
func (c Counts) F1() float64 { return ratio(2*c.TP, 2*c.TP+c.FP+c.FN) }

// FalseAlarmRate is FP / (FP + TN): the share of normal rows flagged.
func (c Counts) FalseAlarmRate() float64 { return ratio(c.FP, c.FP+c.TN) }

func ratio(a, b int) float64 {
	if b == 0 {
		return math.NaN()
	}
	return float64(a) / float64(b)
}

// Curves returns the ROC curve (false-alarm rate against recall) and the
// precision-recall curve (recall against precision) of flagging rows
// above each distinct score, from the highest threshold down, and the
// average precision: the sum over those thresholds of precision times the
// rise in recall (the step-wise area under the precision-recall curve,
// no interpolation).
func Curves(scores []float64, positive []bool) (roc, pr []Point, ap float64, err error) {
	np, nn, err := checkLabels(scores, positive)
	if err != nil {
		return nil, nil, 0, err
	}
	if np == 0 || nn == 0 {
		return nil, nil, 0, fmt.Errorf("anomaly: curves need both classes (%d anomalous, %d normal)", np, nn)
	}
	idx := make([]int, len(scores))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return scores[idx[a]] > scores[idx[b]] })
	roc = append(roc, Point{X: 0, Y: 0, Threshold: scores[idx[0]]})
	tp, fp := 0, 0
	prevRecall := 0.0
	for i := 0; i < len(idx); {
		j := i
		for j < len(idx) && scores[idx[j]] == scores[idx[i]] {
			if positive[idx[j]] {
				tp++
			} else {
				fp++
			}
			j++
		}
		// rows scoring at least scores[idx[i]] are flagged: the threshold
		// just below it
		th := scores[idx[i]]
		if j < len(idx) {
			th = scores[idx[j]]
		}
		recall := float64(tp) / float64(np)
		precision := float64(tp) / float64(tp+fp)
		roc = append(roc, Point{X: float64(fp) / float64(nn), Y: recall, Threshold: th})
		pr = append(pr, Point{X: recall, Y: precision, Threshold: th})
		ap += (recall - prevRecall) * precision
		prevRecall = recall
		i = j
	}
	return roc, pr, ap, nil
}
