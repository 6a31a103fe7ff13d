#!/usr/bin/python3
"""Writes trajectories.json: 20-step optimiser trajectories on a fixed
quadratic and on the Rosenbrock function, computed with torch.optim from
Debian's python3-torch in float64; used by optim/trajectory_test.go.

    /usr/bin/python3 testdata/optim/make_golden.py > testdata/optim/trajectories.json
"""
import json

import torch

torch.set_default_dtype(torch.float64)
A = torch.tensor([[3.0, 0.5], [0.5, 1.0]])
b = torch.tensor([1.0, -2.0])


def quadratic(w):
    return 0.5 * w @ A @ w - b @ w


def rosenbrock(w):
    return (1 - w[0]) ** 2 + 100 * (w[1] - w[0] ** 2) ** 2


# Per-function learning-rate scales: plain gradient steps on Rosenbrock need
# a small rate from this start to stay finite.
FUNCS = {"quadratic": (quadratic, [2.0, -1.0], {"SGD": 1.0, "other": 1.0}),
         "rosenbrock": (rosenbrock, [-1.5, 2.0], {"SGD": 0.002, "other": 1.0})}

# name, constructor, keyword arguments (lr is scaled per function), scheduler
CONFIGS = [
    ("sgd", torch.optim.SGD, dict(lr=0.1), None),
    ("sgd_momentum", torch.optim.SGD, dict(lr=0.1, momentum=0.9), None),
    ("sgd_momentum_dampening", torch.optim.SGD, dict(lr=0.1, momentum=0.9, dampening=0.1), None),
    ("sgd_nesterov_wd", torch.optim.SGD, dict(lr=0.1, momentum=0.9, nesterov=True, weight_decay=0.01), None),
    ("adam", torch.optim.Adam, dict(lr=0.05), None),
    ("adam_betas_wd", torch.optim.Adam, dict(lr=0.05, betas=(0.5, 0.99), eps=1e-6, weight_decay=0.1), None),
    ("adamw", torch.optim.AdamW, dict(lr=0.05, weight_decay=0.1), None),
    ("rmsprop", torch.optim.RMSprop, dict(lr=0.01), None),
    ("rmsprop_momentum_wd", torch.optim.RMSprop, dict(lr=0.01, momentum=0.5, weight_decay=0.01), None),
    ("sgd_step_decay", torch.optim.SGD, dict(lr=0.1), ("step", dict(step_size=5, gamma=0.5))),
    ("adam_cosine", torch.optim.Adam, dict(lr=0.05), ("cosine", dict(T_max=20, eta_min=0.0))),
]

out = {"torch": torch.__version__, "steps": 20, "runs": []}
for fname, (f, start, scale) in FUNCS.items():
    for name, ctor, kw, sched in CONFIGS:
        kw = dict(kw)
        kw["lr"] *= scale.get(ctor.__name__, scale["other"])
        w = torch.tensor(start, requires_grad=True)
        opt = ctor([w], **kw)
        sch = None
        if sched and sched[0] == "step":
            sch = torch.optim.lr_scheduler.StepLR(opt, **sched[1])
        elif sched and sched[0] == "cosine":
            sch = torch.optim.lr_scheduler.CosineAnnealingLR(opt, **sched[1])
        traj = []
        for _ in range(20):
            opt.zero_grad()
            loss = f(w)
            loss.backward()
            opt.step()
            if sch:
                sch.step()
            traj.append(w.detach().tolist())
        cfg = {k: (list(v) if isinstance(v, tuple) else v) for k, v in kw.items()}
        out["runs"].append({"func": fname, "name": name, "optimizer": ctor.__name__, "config": cfg,
                            "schedule": sched[0] if sched else "", "schedule_args": sched[1] if sched else {},
                            "start": start, "trajectory": traj})

# Global-norm clipping: torch.nn.utils.clip_grad_norm_.
clip = []
for max_norm in (0.5, 100.0):
    p1 = torch.zeros(3, requires_grad=True)
    p2 = torch.zeros(2, 2, requires_grad=True)
    p1.grad = torch.tensor([1.0, -2.0, 3.0])
    p2.grad = torch.tensor([[0.5, -0.5], [4.0, 0.25]])
    norm = torch.nn.utils.clip_grad_norm_([p1, p2], max_norm)
    clip.append({"max_norm": max_norm, "norm": norm.item(), "g1": p1.grad.tolist(),
                 "g2": sum(p2.grad.tolist(), [])})
out["clip"] = clip
print(json.dumps(out, indent=1))
