#!/usr/bin/python3
"""Writes golden.json: loss values computed with general-purpose libraries
from Debian's packages (python3-numpy, python3-scipy, python3-torch), used
by losses/golden_test.go. Run with Debian's interpreter:

    /usr/bin/python3 testdata/losses/make_golden.py > testdata/losses/golden.json

Inputs are drawn with numpy's seeded generator and stored in the file, so
the Go side reads the exact same numbers.
"""
import json
import math

import numpy as np
import scipy
import scipy.integrate
import scipy.spatial.distance
import scipy.special
import scipy.stats
import torch
import torch.nn.functional as F

rng = np.random.default_rng(20261201)
cases = []
versions = {"numpy": np.__version__, "scipy": scipy.__version__, "torch": torch.__version__}


def add(name, fn, args, value, source, dim=0, extra=None):
    c = {"name": name, "fn": fn, "args": {k: list(map(float, np.ravel(v))) for k, v in args.items()},
         "dim": dim, "value": float(value), "source": source}
    if extra:
        c.update(extra)
    cases.append(c)


def t(a):
    return torch.tensor(np.asarray(a, dtype=np.float64))


# Mean squared error: torch.nn.functional.mse_loss (mean reduction).
p, y = rng.normal(size=(4, 3)), rng.normal(size=(4, 3))
add("mse", "MSE", {"pred": p, "target": y}, F.mse_loss(t(p), t(y)).item(), "torch.nn.functional.mse_loss")

# BCE on probabilities: torch.nn.functional.binary_cross_entropy.
p = rng.uniform(0.02, 0.98, size=(3, 4))
y = rng.uniform(0, 1, size=(3, 4))
add("bce", "BCE", {"p": p, "y": y}, F.binary_cross_entropy(t(p), t(y)).item(),
    "torch.nn.functional.binary_cross_entropy")
# Edge: p exactly 0 and 1 (torch clamps each log at -100).
p = np.array([0.0, 1.0, 0.5, 1.0])
y = np.array([1.0, 0.0, 1.0, 1.0])
add("bce_edges", "BCE", {"p": p, "y": y}, F.binary_cross_entropy(t(p), t(y)).item(),
    "torch.nn.functional.binary_cross_entropy (log clamped at -100)")

# BCE on logits, including +/-100: torch.nn.functional.binary_cross_entropy_with_logits.
x = np.concatenate([rng.normal(scale=3, size=10), [100.0, -100.0, 100.0, -100.0, 0.0]])
y = np.concatenate([rng.uniform(0, 1, size=10), [1.0, 0.0, 0.0, 1.0, 0.3]])
add("bce_logits", "BCEWithLogits", {"x": x, "y": y},
    F.binary_cross_entropy_with_logits(t(x), t(y)).item(), "torch.nn.functional.binary_cross_entropy_with_logits")

# Gaussian NLL: scipy.stats.norm.logpdf.
x, mu, lv = rng.normal(size=8), rng.normal(size=8), rng.normal(scale=0.5, size=8)
add("gauss_nll", "GaussianNLL", {"x": x, "mu": mu, "logvar": lv},
    -np.mean(scipy.stats.norm.logpdf(x, loc=mu, scale=np.exp(lv / 2))), "scipy.stats.norm.logpdf")

# KL of N(mu, diag(exp(lv))) from N(0, I): torch.distributions.kl_divergence, rows averaged.
mu, lv = rng.normal(size=(5, 3)), rng.normal(scale=0.7, size=(5, 3))
q = torch.distributions.Normal(t(mu), torch.exp(t(lv) / 2))
pz = torch.distributions.Normal(torch.zeros(5, 3, dtype=torch.float64), torch.ones(5, 3, dtype=torch.float64))
kl = torch.distributions.kl_divergence(q, pz)
add("kl_std_normal", "KLStdNormal", {"mu": mu, "logvar": lv}, kl.sum(1).mean().item(),
    "torch.distributions.kl_divergence(Normal, Normal)", dim=3,
    extra={"perdim": list(map(float, kl.mean(0).numpy()))})

# 1-D KL from N(0,1) by numerical integration: scipy.integrate.quad.
for m, s in [(0.7, 0.4), (-1.5, 2.0)]:
    f = lambda z: scipy.stats.norm.pdf(z, m, s) * (scipy.stats.norm.logpdf(z, m, s) - scipy.stats.norm.logpdf(z))
    v, _ = scipy.integrate.quad(f, m - 40 * s, m + 40 * s, limit=200)
    add("kl_std_normal_quad_%g_%g" % (m, s), "KLStdNormal", {"mu": [m], "logvar": [2 * math.log(s)]}, v,
        "scipy.integrate.quad of p log(p/q)", dim=1)

# KL between two diagonal Gaussians: torch.distributions.kl_divergence.
mu1, lv1 = rng.normal(size=(3, 4)), rng.normal(scale=0.5, size=(3, 4))
mu2, lv2 = rng.normal(size=(3, 4)), rng.normal(scale=0.5, size=(3, 4))
a = torch.distributions.Normal(t(mu1), torch.exp(t(lv1) / 2))
b = torch.distributions.Normal(t(mu2), torch.exp(t(lv2) / 2))
add("kl_diag", "KLDiagGaussians", {"mu1": mu1, "lv1": lv1, "mu2": mu2, "lv2": lv2},
    torch.distributions.kl_divergence(a, b).sum(1).mean().item(), "torch.distributions.kl_divergence(Normal, Normal)", dim=4)
add("kl_diag_rev", "KLDiagGaussians", {"mu1": mu2, "lv1": lv2, "mu2": mu1, "lv2": lv1},
    torch.distributions.kl_divergence(b, a).sum(1).mean().item(), "torch.distributions.kl_divergence(Normal, Normal)", dim=4)

# Discrete divergences: scipy.stats.entropy and scipy.spatial.distance.jensenshannon.
p = rng.dirichlet(np.ones(6))
q = rng.dirichlet(np.ones(6))
add("kl_discrete", "KL", {"p": p, "q": q}, scipy.stats.entropy(p, q), "scipy.stats.entropy(p, q)")
add("kl_discrete_rev", "KL", {"p": q, "q": p}, scipy.stats.entropy(q, p), "scipy.stats.entropy(q, p)")
add("cross_entropy", "CrossEntropy", {"p": p, "q": q}, scipy.stats.entropy(p) + scipy.stats.entropy(p, q),
    "scipy.stats.entropy(p) + scipy.stats.entropy(p, q)")
add("js", "JensenShannon", {"p": p, "q": q}, scipy.spatial.distance.jensenshannon(p, q) ** 2,
    "scipy.spatial.distance.jensenshannon(p, q)**2 (natural log)")
p0 = np.array([0.5, 0.5, 0.0, 0.0])
q0 = np.array([0.0, 0.25, 0.25, 0.5])
add("js_disjoint", "JensenShannon", {"p": p0, "q": q0}, scipy.spatial.distance.jensenshannon(p0, q0) ** 2,
    "scipy.spatial.distance.jensenshannon(p, q)**2 (natural log)")

# Softmax cross-entropy with soft targets: torch.nn.functional.cross_entropy.
x = rng.normal(scale=4, size=(4, 5))
tt = rng.dirichlet(np.ones(5), size=4)
add("softmax_ce", "SoftmaxCrossEntropy", {"x": x, "t": tt}, F.cross_entropy(t(x), t(tt)).item(),
    "torch.nn.functional.cross_entropy (probability targets)", dim=5)

# Sparsity penalties: numpy and scipy.special.rel_entr.
h = rng.normal(size=(6, 4))
add("l1_activity", "L1Activity", {"h": h}, np.abs(h).sum() / 6, "numpy.abs(h).sum()/rows", dim=4)
h = scipy.special.expit(rng.normal(loc=-2, size=(6, 4)))
rho = 0.05
rh = h.mean(0)
v = (scipy.special.rel_entr(rho, rh) + scipy.special.rel_entr(1 - rho, 1 - rh)).sum()
add("kl_sparsity", "KLSparsity", {"h": h}, v, "scipy.special.rel_entr", dim=4, extra={"rho": rho})

# GAN losses from discriminator logits: torch.nn.functional.binary_cross_entropy_with_logits.
r, f = rng.normal(loc=1, size=7), rng.normal(loc=-1, size=5)
for lab in (1.0, 0.9):
    v = F.binary_cross_entropy_with_logits(t(r), torch.full((7,), lab, dtype=torch.float64)) + \
        F.binary_cross_entropy_with_logits(t(f), torch.zeros(5, dtype=torch.float64))
    add("d_bce_%g" % lab, "DiscriminatorBCE", {"real": r, "fake": f}, v.item(),
        "torch.nn.functional.binary_cross_entropy_with_logits", extra={"label": lab})
add("g_nonsat", "GeneratorNonSaturating", {"fake": f},
    F.binary_cross_entropy_with_logits(t(f), torch.ones(5, dtype=torch.float64)).item(),
    "torch.nn.functional.binary_cross_entropy_with_logits(target 1)")
add("g_minimax", "GeneratorMinimax", {"fake": f}, torch.log1p(-torch.sigmoid(t(f))).mean().item(),
    "torch.log1p(-torch.sigmoid(x)).mean()")
add("w_critic", "WassersteinCritic", {"real": r, "fake": f}, np.mean(f) - np.mean(r), "numpy.mean")
add("w_gen", "WassersteinGenerator", {"fake": f}, -np.mean(f), "numpy.mean")

# Grouped softmax cross-entropy (a table's categorical columns): per span,
# torch.nn.functional.cross_entropy with class-index targets, reduction
# "sum", rows whose span is missing (all-zero targets) left out, the sum
# over spans divided by the rows. Columns 0 and 4 are numeric (no part).
x = rng.normal(scale=3, size=(5, 8))
spans = [(1, 4), (5, 8)]
labels = rng.integers(0, 3, size=(5, 2))
missing = [(1, 0), (3, 1)]
tt = np.zeros((5, 8))
for r in range(5):
    for s, (a, b) in enumerate(spans):
        if (r, s) not in missing:
            tt[r, a + labels[r, s]] = 1.0
v = 0.0
for s, (a, b) in enumerate(spans):
    keep = [r for r in range(5) if (r, s) not in missing]
    v += F.cross_entropy(t(x[keep, a:b]), torch.tensor(labels[keep, s]), reduction="sum").item()
add("grouped_softmax_ce", "GroupedSoftmaxCrossEntropy", {"x": x, "t": tt}, v / 5,
    "torch.nn.functional.cross_entropy per column group (class-index targets, sum)", dim=8,
    extra={"spans": [list(s) for s in spans]})

print(json.dumps({"versions": versions, "cases": cases}, indent=1))
