#!/usr/bin/python3
"""Writes golden.json: two-sample Kolmogorov-Smirnov statistics
(scipy.stats.ks_2samp) and Pearson correlations (numpy.corrcoef) on
seeded samples, for fidelity/fidelity_test.go. Run with Debian's
interpreter (python3-numpy, python3-scipy):

    /usr/bin/python3 testdata/fidelity/make_golden.py > testdata/fidelity/golden.json
"""
import json

import numpy as np
import scipy
import scipy.stats

rng = np.random.default_rng(20261203)
cases = []
# continuous samples of different sizes and shifts; rounded samples with
# many ties; one sample inside the other's range
for name, a, b in [
    ("normal_shift", rng.normal(size=40), rng.normal(loc=0.5, size=55)),
    ("ties", np.round(rng.normal(size=60)), np.round(rng.normal(loc=0.3, size=45))),
    ("nested", rng.uniform(0, 10, size=30), rng.uniform(4, 6, size=20)),
    ("same", np.arange(10.0), np.arange(10.0)),
]:
    cases.append({"name": name, "a": list(map(float, a)), "b": list(map(float, b)),
                  "ks": float(scipy.stats.ks_2samp(a, b).statistic),
                  "source": "scipy.stats.ks_2samp(a, b).statistic"})
corr = []
for name, a, b in [
    ("linear_noise", (x := rng.normal(size=50)), 2 * x + rng.normal(size=50)),
    ("negative", (x := rng.uniform(size=30)), -x + 0.1 * rng.normal(size=30)),
    ("binary", rng.integers(0, 2, size=40).astype(float), rng.integers(0, 2, size=40).astype(float)),
]:
    corr.append({"name": name, "a": list(map(float, a)), "b": list(map(float, b)),
                 "r": float(np.corrcoef(a, b)[0, 1]), "source": "numpy.corrcoef(a, b)[0, 1]"})
print(json.dumps({"versions": {"numpy": np.__version__, "scipy": scipy.__version__}, "ks": cases, "correlation": corr}, indent=1))
