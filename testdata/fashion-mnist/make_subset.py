#!/usr/bin/python3
"""Cuts the committed Fashion-MNIST subsets from the full idx files.

    scripts/fetch-data.sh .data
    python3 testdata/fashion-mnist/make_subset.py .data/fashion-mnist testdata/fashion-mnist

Keeps the first 2000 training and the first 500 test images with their
labels, in the original idx format, gzip-compressed with mtime 0 so that the
output is byte-for-byte reproducible.
"""
import gzip
import struct
import sys

src, dst = sys.argv[1], sys.argv[2]
for name, n in [("train", 2000), ("t10k", 500)]:
    with gzip.open(f"{src}/{name}-images-idx3-ubyte.gz") as f:
        magic, count, rows, cols = struct.unpack(">IIII", f.read(16))
        assert magic == 0x803
        data = f.read(n * rows * cols)
    with open(f"{dst}/{name}-images-idx3-ubyte-first{n}.gz", "wb") as raw:
        with gzip.GzipFile(fileobj=raw, mode="wb", mtime=0) as g:
            g.write(struct.pack(">IIII", magic, n, rows, cols) + data)
    with gzip.open(f"{src}/{name}-labels-idx1-ubyte.gz") as f:
        magic, count = struct.unpack(">II", f.read(8))
        assert magic == 0x801
        labels = f.read(n)
    with open(f"{dst}/{name}-labels-idx1-ubyte-first{n}.gz", "wb") as raw:
        with gzip.GzipFile(fileobj=raw, mode="wb", mtime=0) as g:
            g.write(struct.pack(">II", magic, n) + labels)
