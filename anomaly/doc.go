// Package anomaly turns model scores into decisions: it calibrates a
// threshold on held-out normal data (by the largest score, or by a
// quantile for a target false-alarm rate, reporting the rate to expect),
// and evaluates scores against known labels with the ROC AUC and precision
// and recall at a threshold.
//
// Scores are a decision aid, calibrated only for data like the data the
// threshold was set on: print Caution wherever a score drives an alarm.
package anomaly
