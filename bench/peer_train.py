#!/usr/bin/python3
"""Peer for the training benchmark: the reference shapes in Debian's
python3-torch, float32, Adam, timed over a fixed number of steps after a
warm-up, on random values in [0, 1]. Prints one line per shape:
NAME samples_per_s GFLOP_per_s, then the 1024x1024 matrix product rate.
Run by bench/train.sh, which sets the thread count and points torch at
OpenBLAS (Debian's libopenblas0-pthread) through LD_LIBRARY_PATH.

    python3 peer_train.py THREADS
"""
import sys
import time

import torch
import torch.nn.functional as F

threads = int(sys.argv[1])
torch.set_num_threads(threads)
torch.manual_seed(1)


def mlp(widths, act, out_act=None):
    layers = []
    for i in range(len(widths) - 1):
        layers.append(torch.nn.Linear(widths[i], widths[i + 1]))
        if i < len(widths) - 2:
            layers.append(act())
    if out_act:
        layers.append(out_act())
    return torch.nn.Sequential(*layers)


def flops(widths, data_input=True):
    # 2 per weight forward, 2 for its gradient, 2 for the gradient of the
    # layer's input: not needed (nor computed, on either side) for a first
    # layer fed with data
    f = sum(6 * widths[i] * widths[i + 1] for i in range(len(widths) - 1))
    return f - 2 * widths[0] * widths[1] if data_input else f


def timed(name, step, batch, fl, steps, tries=3):
    # the best of a few timed runs, as bench/train.sh takes for quern: the
    # shared machine's speed moves from minute to minute
    for _ in range(3):
        step()
    dt = None
    for _ in range(tries):
        t0 = time.perf_counter()
        for _ in range(steps):
            step()
        d = time.perf_counter() - t0
        dt = d if dt is None else min(dt, d)
    print("%s %.1f %.3f" % (name, steps * batch / dt, fl * steps * batch / dt / 1e9), flush=True)


# VAE 784-400-(20,20)-400-784, ReLU, BCE on logits + KL, batch 128
enc, dec = mlp([784, 400, 40], torch.nn.ReLU), mlp([20, 400, 784], torch.nn.ReLU)
opt = torch.optim.Adam(list(enc.parameters()) + list(dec.parameters()), lr=1e-3)
x = torch.rand(128, 784)


def vae_step():
    h = enc(x)
    mu, lv = h[:, :20], h[:, 20:]
    z = mu + torch.exp(0.5 * lv) * torch.randn_like(mu)
    rec = F.binary_cross_entropy_with_logits(dec(z), x, reduction="sum") / 128
    kl = -0.5 * torch.sum(1 + lv - mu * mu - lv.exp()) / 128
    opt.zero_grad()
    (rec + kl).backward()
    opt.step()


timed("vae784", vae_step, 128, flops([784, 400, 40]) + flops([20, 400, 784], False), 40)

# AE 784-128-32-128-784, MSE, batch 256
ae = mlp([784, 128, 32, 128, 784], torch.nn.ReLU)
opt = torch.optim.Adam(ae.parameters(), lr=1e-3)
x = torch.rand(256, 784)


def ae_step():
    loss = F.mse_loss(ae(x), x)
    opt.zero_grad()
    loss.backward()
    opt.step()


timed("ae784", ae_step, 256, flops([784, 128, 32, 128, 784]), 40)

# GAN: G 64-256-512-784 (leaky 0.2, tanh), D 784-512-256-1, batch 64
G = mlp([64, 256, 512, 784], lambda: torch.nn.LeakyReLU(0.2), torch.nn.Tanh)
D = mlp([784, 512, 256, 1], lambda: torch.nn.LeakyReLU(0.2))
og = torch.optim.Adam(G.parameters(), lr=2e-4, betas=(0.5, 0.999))
od = torch.optim.Adam(D.parameters(), lr=2e-4, betas=(0.5, 0.999))
x = torch.rand(64, 784)
ones, zeros = torch.ones(64, 1), torch.zeros(64, 1)


def gan_step():
    fake = G(torch.randn(64, 64))
    ld = F.binary_cross_entropy_with_logits(D(x), ones) + F.binary_cross_entropy_with_logits(D(fake.detach()), zeros)
    od.zero_grad()
    ld.backward()
    od.step()
    lg = F.binary_cross_entropy_with_logits(D(G(torch.randn(64, 64))), ones)
    og.zero_grad()
    lg.backward()
    og.step()


g = sum(a * b for a, b in [(64, 256), (256, 512), (512, 784)])
d = sum(a * b for a, b in [(784, 512), (512, 256), (256, 1)])
timed("gan784", gan_step, 64, 8 * g + 16 * d, 20)

# tiny 16-8-2-8-16 autoencoder, batch 32
tiny = mlp([16, 8, 2, 8, 16], torch.nn.ReLU)
opt = torch.optim.Adam(tiny.parameters(), lr=1e-3)
x = torch.rand(32, 16)


def tiny_step():
    loss = F.mse_loss(tiny(x), x)
    opt.zero_grad()
    loss.backward()
    opt.step()


timed("tiny", tiny_step, 32, flops([16, 8, 2, 8, 16]), 2000)

# convolutional VAE on 28x28 grey images: 3x3 stride-2 convolutions of 32
# and 64 channels (padding 1, ReLU), a linear layer to 16 means and 16
# log-variances, a linear layer back to 64x7x7 (ReLU) and the transposed
# convolutions (output padding 1), BCE on logits + KL, batch 128
cenc = torch.nn.Sequential(
    torch.nn.Conv2d(1, 32, 3, stride=2, padding=1), torch.nn.ReLU(),
    torch.nn.Conv2d(32, 64, 3, stride=2, padding=1), torch.nn.ReLU(),
    torch.nn.Flatten(), torch.nn.Linear(64 * 7 * 7, 32))
cdec = torch.nn.Sequential(
    torch.nn.Linear(16, 64 * 7 * 7), torch.nn.ReLU(), torch.nn.Unflatten(1, (64, 7, 7)),
    torch.nn.ConvTranspose2d(64, 32, 3, stride=2, padding=1, output_padding=1), torch.nn.ReLU(),
    torch.nn.ConvTranspose2d(32, 1, 3, stride=2, padding=1, output_padding=1))
opt = torch.optim.Adam(list(cenc.parameters()) + list(cdec.parameters()), lr=1e-3)
x = torch.rand(128, 1, 28, 28)


def conv_vae_step():
    h = cenc(x)
    mu, lv = h[:, :16], h[:, 16:]
    z = mu + torch.exp(0.5 * lv) * torch.randn_like(mu)
    rec = F.binary_cross_entropy_with_logits(cdec(z), x, reduction="sum") / 128
    kl = -0.5 * torch.sum(1 + lv - mu * mu - lv.exp()) / 128
    opt.zero_grad()
    (rec + kl).backward()
    opt.step()


# flops per sample as train.BenchmarkTrainStepConvVAE counts them: 6 per
# weight use (2 fewer for the first convolution, fed with data), 6 per
# dense weight
uses = [14 * 14 * 32 * 9, 7 * 7 * 64 * 9 * 32, 7 * 7 * 64 * 9 * 32, 14 * 14 * 32 * 9]
conv_flops = 6 * sum(uses) - 2 * uses[0] + 6 * (3136 * 32 + 16 * 3136)
timed("convvae", conv_vae_step, 128, conv_flops, 20)

a, b = torch.rand(1024, 1024), torch.rand(1024, 1024)
for _ in range(3):
    a @ b
t0 = time.perf_counter()
for _ in range(10):
    a @ b
print("sgemm1024 0 %.3f" % (10 * 2 * 1024 ** 3 / (time.perf_counter() - t0) / 1e9))
