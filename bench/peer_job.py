#!/usr/bin/python3
"""Peer for the whole-job benchmark: the job bench/job.sh runs through the
quern command line, written as a user of Debian's python3-torch would
write it, timing each phase and printing one line per phase:
`phase NAME SECONDS`.

    python3 peer_job.py JOB THREADS EPOCHS TRAIN TEST OUT

JOB is vae (784-400-20, Bernoulli decoder), ae (784-128-32-128-784,
binary cross-entropy on images) or table (a CSV with a header, the
autoencoder 32-16-4-16-32 on standardised columns, squared error). TRAIN
and TEST are gzip idx image files, or CSV files for table (TEST may be
the same file: every row is scored). The job: load, hold out 10% of the
training rows (seeded), train EPOCHS epochs (Adam 1e-3, batch 128),
calibrate a threshold at the 99th percentile of the held-out rows'
scores (for the VAE the negative ELBO with 16 draws a row), score the
test rows with the three columns that contribute most, write the scores
as CSV; then encode every training row and draw 10,000 samples (VAE),
writing both as CSV.
"""
import csv
import gzip
import struct
import sys
import time

import numpy as np
import torch
import torch.nn.functional as F

job, threads, epochs, train_path, test_path, out = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4], sys.argv[5], sys.argv[6]
torch.set_num_threads(threads)
torch.manual_seed(1)
rng = np.random.default_rng(1)
clock = time.perf_counter()


def phase(name):
    global clock
    now = time.perf_counter()
    print(f"phase {name} {now - clock:.4f}", flush=True)
    clock = now


def read_idx(path):
    with gzip.open(path, "rb") as f:
        raw = f.read()
    _, _, _, nd = struct.unpack(">BBBB", raw[:4])
    dims = struct.unpack(">" + "I" * nd, raw[4:4 + 4 * nd])
    x = np.frombuffer(raw, dtype=np.uint8, offset=4 + 4 * nd).reshape(dims[0], -1)
    return x.astype(np.float32) / 255.0, None


def read_csv(path):
    x = np.loadtxt(path, delimiter=",", skiprows=1, dtype=np.float32)
    with open(path) as f:
        names = f.readline().strip().split(",")
    return x, names


read = read_csv if job == "table" else read_idx
x, names = read(train_path)
xt = x if test_path == train_path else read(test_path)[0]
if names is None:
    names = [f"c{i}" for i in range(x.shape[1])]
phase("load")

perm = rng.permutation(len(x))
nval = int(round(0.1 * len(x)))
val, tr = x[perm[:nval]], x[perm[nval:]]
mean = std = None
if job == "table":
    mean, std = tr.mean(0), tr.std(0) + 1e-12
    scale = lambda a: (a - mean) / std
else:
    scale = lambda a: a
trs, vals = torch.from_numpy(scale(tr)), torch.from_numpy(scale(val))


def mlp(widths, out_act=None):
    layers = []
    for i in range(len(widths) - 1):
        layers.append(torch.nn.Linear(widths[i], widths[i + 1]))
        if i < len(widths) - 2:
            layers.append(torch.nn.ReLU())
    return torch.nn.Sequential(*layers)


d = x.shape[1]
if job == "vae":
    enc, dec = mlp([d, 400, 40]), mlp([20, 400, d])
    params = list(enc.parameters()) + list(dec.parameters())
elif job == "ae":
    net = mlp([d, 128, 32, 128, d])
    params = list(net.parameters())
else:
    net = mlp([d, 16, 4, 16, d])
    params = list(net.parameters())
opt = torch.optim.Adam(params, lr=1e-3)


def vae_bound(xb, samples):
    """Per-row ELBO with samples draws and the per-column terms of the
    posterior-mean reconstruction (for the top features)."""
    h = enc(xb)
    mu, lv = h[:, :20], h[:, 20:]
    eps = torch.randn(samples, *mu.shape)
    z = mu + torch.exp(0.5 * lv) * eps
    logits = dec(z.reshape(-1, 20)).reshape(samples, xb.shape[0], d)
    ll = -F.binary_cross_entropy_with_logits(logits, xb.expand(samples, -1, -1), reduction="none").sum(-1)
    kl = -0.5 * (1 + lv - mu ** 2 - torch.exp(lv)).sum(-1)
    return ll.mean(0) - kl


def score_rows(xb):
    """Scores and per-column contributions of scaled rows."""
    if job == "vae":
        s = -vae_bound(xb, 16)
        contrib = F.binary_cross_entropy_with_logits(dec(enc(xb)[:, :20]), xb, reduction="none")
        return s, contrib
    r = net(xb)
    if job == "ae":
        contrib = F.binary_cross_entropy_with_logits(r, xb, reduction="none")
    else:
        contrib = (r - xb) ** 2
    return contrib.mean(1), contrib


for epoch in range(epochs):
    order = torch.from_numpy(rng.permutation(len(trs)))
    for i in range(0, len(trs), 128):
        xb = trs[order[i:i + 128]]
        if job == "vae":
            loss = -vae_bound(xb, 1).mean()
        else:
            r = net(xb)
            loss = F.binary_cross_entropy_with_logits(r, xb) if job == "ae" else F.mse_loss(r, xb)
        opt.zero_grad()
        loss.backward()
        opt.step()
    with torch.no_grad():
        score_rows(vals)  # the validation loss an epoch, as quern reports it
phase("train")

with torch.no_grad():
    vs = torch.cat([score_rows(vals[i:i + 4096])[0] for i in range(0, len(vals), 4096)])
    threshold = float(torch.quantile(vs.double(), 0.99))
phase("calibrate")

rows = []
with torch.no_grad():
    xts = torch.from_numpy(scale(xt))
    for i in range(0, len(xts), 4096):
        s, c = score_rows(xts[i:i + 4096])
        share = c / c.sum(1, keepdim=True)
        top = torch.topk(share, 3, dim=1)
        for k in range(len(s)):
            v = float(s[k])
            rows.append([i + k + 1, f"{v:.8g}", f"{threshold:.8g}", "true" if v > threshold else "false"] +
                        [x for j in range(3) for x in (names[int(top.indices[k, j])], f"{float(top.values[k, j]):.4f}")])
phase("score")
with open(out + "-scores.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["row", "score", "threshold", "anomaly", "feature1", "share1", "feature2", "share2", "feature3", "share3"])
    w.writerows(rows)
phase("write")

with torch.no_grad():
    xs = torch.from_numpy(scale(x))
    codes = []
    for i in range(0, len(xs), 4096):
        h = enc(xs[i:i + 4096])[:, :20] if job == "vae" else net[:3](xs[i:i + 4096])
        codes.append(h.numpy())
    np.savetxt(out + "-codes.csv", np.concatenate(codes), delimiter=",", fmt="%.8g", header=",".join(f"z{i}" for i in range(codes[0].shape[1])), comments="")
phase("encode")
if job == "vae":
    with torch.no_grad():
        smp = torch.sigmoid(dec(torch.randn(10000, 20))).numpy()
    np.savetxt(out + "-samples.csv", smp, delimiter=",", fmt="%.8g", header=",".join(names), comments="")
    phase("sample")
