#!/usr/bin/python3
"""Writes golden.json: 2-D convolutions and their gradients computed with
torch.nn.functional.conv2d and torch.autograd in Debian's python3-torch,
and the transposed convolution (torch.nn.functional.conv_transpose2d),
for layers/conv_test.go. Run with Debian's interpreter:

    /usr/bin/python3 testdata/conv/make_golden.py > testdata/conv/golden.json

Tensors are stored channels last (rows of H x W x C values, the layout
quern's image rows have): the input N x H x W x C, the output
N x OH x OW x OC, the weights OC x KH x KW x C, the bias OC. The gradients
are those of sum(output * g) for the stored g.
"""
import json

import numpy as np
import torch
import torch.nn.functional as F

rng = np.random.default_rng(20261203)
cases = []
for name, n, c, h, w, oc, kh, kw, stride, pad in [
    ("odd_3x3_stride1_pad1", 2, 3, 7, 5, 4, 3, 3, 1, 1),
    ("stride2_pad1", 2, 2, 9, 8, 3, 3, 3, 2, 1),
    ("kernel_2x4_nopad", 1, 1, 6, 7, 2, 2, 4, 1, 0),
    ("stride2_pad2_k5", 3, 4, 11, 10, 5, 5, 5, 2, 2),
]:
    x = rng.normal(size=(n, c, h, w))
    wt = rng.normal(scale=0.5, size=(oc, c, kh, kw))
    b = rng.normal(size=oc)
    tx = torch.tensor(x, requires_grad=True)
    tw = torch.tensor(wt, requires_grad=True)
    tb = torch.tensor(b, requires_grad=True)
    out = F.conv2d(tx, tw, tb, stride=stride, padding=pad)
    g = rng.normal(size=tuple(out.shape))
    (out * torch.tensor(g)).sum().backward()

    def nhwc(a):  # N C H W -> N H W C
        return np.transpose(a, (0, 2, 3, 1)).ravel().tolist()

    def ohwc(a):  # OC C KH KW -> OC KH KW C
        return np.transpose(a, (0, 2, 3, 1)).ravel().tolist()

    cases.append({
        "name": name, "n": n, "c": c, "h": h, "w": w, "oc": oc, "kh": kh, "kw": kw,
        "stride": stride, "pad": pad, "oh": int(out.shape[2]), "ow": int(out.shape[3]),
        "x": nhwc(x), "weight": ohwc(wt), "bias": b.tolist(),
        "out": nhwc(out.detach().numpy()), "g": nhwc(g),
        "dx": nhwc(tx.grad.numpy()), "dweight": ohwc(tw.grad.numpy()), "dbias": tb.grad.numpy().tolist(),
        "source": "torch.nn.functional.conv2d(x, w, b, stride=%d, padding=%d) and torch.autograd" % (stride, pad),
    })
# Transposed convolutions: torch.nn.functional.conv_transpose2d, the
# weights stored Cin x KH x KW x Cout (from torch's Cin x Cout x KH x KW).
transposed = []
for name, n, c, h, w, oc, kh, kw, stride, pad, opad in [
    ("t_stride2_pad1_k3", 2, 3, 4, 5, 2, 3, 3, 2, 1, 1),
    ("t_stride1_k2x3", 1, 2, 5, 4, 3, 2, 3, 1, 0, 0),
    ("t_stride2_k4_pad1", 2, 4, 3, 3, 5, 4, 4, 2, 1, 0),
]:
    x = rng.normal(size=(n, c, h, w))
    wt = rng.normal(scale=0.5, size=(c, oc, kh, kw))
    b = rng.normal(size=oc)
    tx = torch.tensor(x, requires_grad=True)
    tw = torch.tensor(wt, requires_grad=True)
    tb = torch.tensor(b, requires_grad=True)
    out = F.conv_transpose2d(tx, tw, tb, stride=stride, padding=pad, output_padding=opad)
    g = rng.normal(size=tuple(out.shape))
    (out * torch.tensor(g)).sum().backward()

    def nhwc(a):
        return np.transpose(a, (0, 2, 3, 1)).ravel().tolist()

    def ihwo(a):  # Cin Cout KH KW -> Cin KH KW Cout
        return np.transpose(a, (0, 2, 3, 1)).ravel().tolist()

    transposed.append({
        "name": name, "n": n, "c": c, "h": h, "w": w, "oc": oc, "kh": kh, "kw": kw,
        "stride": stride, "pad": pad, "oh": int(out.shape[2]), "ow": int(out.shape[3]),
        "x": nhwc(x), "weight": ihwo(wt), "bias": b.tolist(),
        "out": nhwc(out.detach().numpy()), "g": nhwc(g),
        "dx": nhwc(tx.grad.numpy()), "dweight": ihwo(tw.grad.numpy()), "dbias": tb.grad.numpy().tolist(),
        "source": "torch.nn.functional.conv_transpose2d(x, w, b, stride=%d, padding=%d, output_padding=%d) and torch.autograd" % (stride, pad, opad),
    })
print(json.dumps({"versions": {"torch": torch.__version__, "numpy": np.__version__}, "cases": cases, "transposed": transposed}))
