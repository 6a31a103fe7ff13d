#!/usr/bin/python3
"""Writes auc.json: ROC AUC of fixed score vectors, computed as the
Mann-Whitney U statistic of scipy.stats.mannwhitneyu (Debian's
python3-scipy) divided by n_pos*n_neg; used by anomaly/anomaly_test.go.

    /usr/bin/python3 testdata/anomaly/make_golden.py > testdata/anomaly/auc.json
"""
import json

import numpy as np
import scipy
import scipy.stats

rng = np.random.default_rng(7)
cases = []
for name, pos, neg in [
    ("separated", rng.normal(2, 1, 40), rng.normal(0, 1, 60)),
    ("overlap", rng.normal(0.3, 1, 25), rng.normal(0, 1, 30)),
    ("ties", np.array([1, 2, 2, 3, 3, 3, 5.0]), np.array([0, 1, 2, 3, 4.0])),
    ("inverted", rng.normal(-1, 1, 10), rng.normal(1, 1, 12)),
]:
    u = scipy.stats.mannwhitneyu(pos, neg, alternative="two-sided").statistic
    scores = list(map(float, np.concatenate([pos, neg])))
    labels = [True] * len(pos) + [False] * len(neg)
    cases.append({"name": name, "scores": scores, "positive": labels, "auc": float(u) / (len(pos) * len(neg))})
print(json.dumps({"scipy": scipy.__version__, "cases": cases}, indent=1))
