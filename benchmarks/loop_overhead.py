"""Loop overhead: training steps per second of heatwalk.fit against a minimal hand-written torch loop.

Both loops use the same space (T^2 by default), network (MLP 256 x 3 with the
same time features), batch size, Adam optimiser and loss (exact wrapped-normal
score target, σ²-weighted); the hand-written loop has no progress bar, EMA,
learning-rate schedule, checks or checkpoints. Measured side by side in one
run, alternating, best of R repeats. Target: heatwalk >= 0.9 of the
hand-written loop.

    python benchmarks/loop_overhead.py [--steps 300] [--batch 512] [--repeats 3] [--threads 1]
"""

from __future__ import annotations

import argparse
import json
import math
import time

import torch

import heatwalk
from heatwalk.core.networks import MLPDenoiser
from heatwalk.core.schedule import TimeSchedule
from heatwalk.spaces import Torus


def hand_loop(space, data, steps, batch, lr, seed):
    torch.manual_seed(seed)
    sched = TimeSchedule(*space.time_range)
    net = MLPDenoiser(space.embed_dim, sched.n_features, space.dim, 256, 3)
    opt = torch.optim.Adam(net.parameters(), lr=lr)
    g = torch.Generator().manual_seed(seed)
    t0 = time.perf_counter()
    for _ in range(steps):
        x0 = data[torch.randint(data.shape[0], (batch,), generator=g)]
        t = sched.sample(batch, g)
        xt = space.sample_forward(x0, t, g)
        target = t.sqrt()[:, None] * space.score(xt, x0, t)
        pred = net(space.embed(xt).float(), sched.features(t).float()).double()
        loss = (pred - target).square().sum(-1).mean() / space.dim
        opt.zero_grad()
        loss.backward()
        opt.step()
    return steps / (time.perf_counter() - t0)


def heatwalk_loop(space, data, steps, batch, lr, seed):
    t0 = time.perf_counter()
    heatwalk.fit(space, data, steps=steps, batch_size=batch, lr=lr, seed=seed, progress=True,
                 network={"hidden": 256, "depth": 3, "residual": False})
    return steps / (time.perf_counter() - t0)


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--steps", type=int, default=300)
    ap.add_argument("--batch", type=int, default=512)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--json")
    a = ap.parse_args()
    torch.set_num_threads(a.threads)
    space = Torus(2)
    data = space.random_uniform(5000, torch.Generator().manual_seed(1))
    hand, ours = [], []
    for r in range(a.repeats):
        hand.append(hand_loop(space, data, a.steps, a.batch, 2e-3, r))
        ours.append(heatwalk_loop(space, data, a.steps, a.batch, 2e-3, r))
    h, o = max(hand), max(ours)
    print(f"loop overhead on T^2, batch {a.batch}, {a.steps} steps, threads {a.threads}, best of {a.repeats}")
    print(f"{'loop':<22} {'steps/s':>9}")
    print(f"{'hand-written torch':<22} {h:>9.1f}")
    print(f"{'heatwalk.fit':<22} {o:>9.1f}")
    print(f"ratio heatwalk / hand-written: {o / h:.3f} (target >= 0.9)")
    if a.json:
        with open(a.json, "w") as f:
            json.dump({"hand_steps_per_s": h, "heatwalk_steps_per_s": o, "ratio": o / h}, f, indent=2)


if __name__ == "__main__":
    main()
