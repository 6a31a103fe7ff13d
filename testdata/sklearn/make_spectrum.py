#!/usr/bin/python3
"""Golden values for data.Spectrum: the eigenvalues (numpy.linalg.eigvalsh)
of the covariance (ddof 0) of the z-scored columns of breast_cancer.csv
(this folder; scikit-learn's copy of the UCI Wisconsin diagnostic breast
cancer data, BSD-3-Clause), and of its unscaled columns.
Run: /usr/bin/python3 testdata/sklearn/make_spectrum.py > testdata/sklearn/spectrum.json
"""
import csv, json, os
import numpy as np

here = os.path.dirname(os.path.abspath(__file__))
rows = list(csv.reader(open(os.path.join(here, "breast_cancer.csv"))))[1:]
x = np.array([[float(v) for v in r[:-1]] for r in rows], dtype=np.float32).astype(float)
def ev(z):
    c = z - z.mean(axis=0)
    return sorted(np.linalg.eigvalsh(c.T @ c / len(z)).tolist(), reverse=True)
sd = x.std(axis=0)
sd[sd == 0] = 1
json.dump({"source": "numpy on testdata/sklearn/breast_cancer.csv (make_spectrum.py)",
           "standard": ev((x - x.mean(axis=0)) / sd), "none": ev(x)}, open("/dev/stdout", "w"), indent=1)
