#!/usr/bin/python3
"""Golden values for anomaly.FitGaussian: the Ledoit-Wolf shrunk
covariance (Ledoit and Wolf, J. Multivariate Analysis 88, 2004, the
estimator with target mu*I, mu = trace(S)/p), its inverse and squared
Mahalanobis distances, computed with numpy on the first 60 rows of
scikit-learn's copy of the UCI wine data (Debian python3-sklearn,
sklearn/datasets/data/wine_data.csv, BSD-3-Clause), first 6 columns.
Run: /usr/bin/python3 testdata/anomaly/make_gauss.py WINE_DATA_CSV > testdata/anomaly/gauss.json
"""
import csv, json, sys
import numpy as np

rows = list(csv.reader(open(sys.argv[1])))[1:61]
x = np.array([[float(v) for v in r[:6]] for r in rows])
n, p = x.shape
c = x - x.mean(axis=0)
s = c.T @ c / n
mu = np.trace(s) / p
d2 = ((s - mu * np.eye(p)) ** 2).sum() / p
b2 = sum(((np.outer(r, r) - s) ** 2).sum() for r in c) / (n * n) / p
b2 = min(b2, d2)
shrink = b2 / d2
cov = shrink * mu * np.eye(p) + (1 - shrink) * s
prec = np.linalg.inv(cov)
d = np.einsum("ij,jk,ik->i", c, prec, c)
json.dump({"source": "numpy on wine_data.csv rows 1-60, columns 1-6 (testdata/anomaly/make_gauss.py)",
           "x": x.tolist(), "shrinkage": shrink, "mean": x.mean(axis=0).tolist(),
           "precision": prec.ravel().tolist(), "distance": d.tolist()}, sys.stdout, indent=1)
