#!/usr/bin/python3
"""Writes frechet.json: Fréchet distances between Gaussians computed with
scipy.linalg.sqrtm (Debian's python3-scipy) as
||m1-m2||^2 + Tr(S1 + S2 - 2 sqrtm(S1 S2)); used by gan/frechet_test.go.

    /usr/bin/python3 testdata/gan/make_golden.py > testdata/gan/frechet.json
"""
import json

import numpy as np
import scipy
import scipy.linalg


def fd(m1, s1, m2, s2):
    covmean = scipy.linalg.sqrtm(s1 @ s2)
    covmean = covmean.real
    return float(np.sum((m1 - m2) ** 2) + np.trace(s1 + s2 - 2 * covmean))


def spd(rng, n):
    a = rng.normal(size=(n, n))
    return a @ a.T + 0.1 * np.eye(n)


rng = np.random.default_rng(5)
cases = []
m1, m2 = np.array([0.5, -1.0]), np.array([1.5, 0.25])
s1 = np.array([[2.0, 0.8], [0.8, 1.0]])
s2 = np.array([[1.0, -0.3], [-0.3, 0.5]])
cases.append(("2d_nondiagonal", m1, s1, m2, s2))
cases.append(("3d", rng.normal(size=3), spd(rng, 3), rng.normal(size=3), spd(rng, 3)))
cases.append(("2d_diagonal", np.zeros(2), np.diag([1.0, 4.0]), np.ones(2), np.diag([9.0, 1.0])))
out = []
for name, a, sa, b, sb in cases:
    out.append({"name": name, "mu1": a.tolist(), "cov1": sa.tolist(), "mu2": b.tolist(), "cov2": sb.tolist(),
                "fd": fd(a, sa, b, sb)})
print(json.dumps({"scipy": scipy.__version__, "cases": out}, indent=1))
