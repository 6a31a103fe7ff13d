#!/usr/bin/python3
"""Peer for the serving benchmark: a 34-16-4-16-34 autoencoder in Debian's
python3-torch, one thread, no_grad, scoring one row at a time (p50, p99)
and 4096-row batches (rows/s). Run by bench/serve.sh, which points torch at
OpenBLAS (Debian's libopenblas0-pthread) through LD_LIBRARY_PATH.
"""
import time

import torch

torch.set_num_threads(1)
torch.manual_seed(1)
model = torch.nn.Sequential(
    torch.nn.Linear(34, 16), torch.nn.ReLU(), torch.nn.Linear(16, 4),
    torch.nn.Linear(4, 16), torch.nn.ReLU(), torch.nn.Linear(16, 34))
x = torch.randn(4096, 34)

with torch.no_grad():
    def score(rows):
        return ((model(rows) - rows) ** 2).mean(dim=1)

    for i in range(2000):
        score(x[i % 4096:i % 4096 + 1])
    lat = []
    for i in range(20000):
        r = x[i % 4096:i % 4096 + 1]
        t0 = time.perf_counter_ns()
        score(r)
        lat.append(time.perf_counter_ns() - t0)
    lat.sort()
    print("peer_single_p50_us %.2f" % (lat[len(lat) // 2] / 1e3))
    print("peer_single_p99_us %.2f" % (lat[len(lat) * 99 // 100] / 1e3))
    for _ in range(20):
        score(x)
    n = 300
    t0 = time.perf_counter()
    for _ in range(n):
        score(x)
    print("peer_batch_rows_per_s %.0f" % (n * 4096 / (time.perf_counter() - t0)))
