"""Sequence training speed: tokens/s of heatwalk.fit against a minimal hand-written masked-diffusion loop.

Both loops train the same network (the default transformer of the discrete
objective: d_model 64, 2 layers, 4 heads, the same time features), on the same
batch size and with Adam at the same learning rate, on 40-residue windows of
K = 21 symbols (20 amino-acid letters and X) under the absorbing (masking)
chain. The data are invented: windows of a random first-order Markov source
on the 21 symbols (no real protein is needed to measure throughput).

The hand-written loop is the masked-diffusion simplification and nothing else:
t ~ U(t_min, 1), each token masked with probability t, loss
(1/t) Σ_masked −log p_θ(x_0,l | x_t) per token, no reconstruction term, no
EMA, no learning-rate schedule, no checks. heatwalk.fit runs its full step
(stratified times, the ELBO integrand through ``space.closed_form_integrand``,
the reconstruction term, EMA, cosine schedule, finite-loss check).

Measured side by side in one run, alternating, best of R repeats; tokens/s =
steps × batch × L / wall time. Goal: heatwalk ≥ 0.8 of the hand-written loop.
Then a per-step profile of each (network forward, backward, objective, optimiser
step), including heatwalk's objective with the general reverse-rates integrand
(``integrand="rates"``, the evaluation used before the closed form).

    python benchmarks/sequence_training.py [--steps 20] [--repeats 3] [--threads 1] [--json PATH]
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import torch
from torch import nn

import heatwalk
from heatwalk.core.networks.transformer import TransformerDenoiser
from heatwalk.core.objectives.discrete_elbo import DiscreteELBO
from heatwalk.core.schedule import TimeSchedule
from heatwalk.spaces import Categories

K, L = 21, 40
LR = 2e-3
RESULTS = Path(__file__).resolve().parent / "results" / "sequence_training.json"


def invented_windows(n: int, seed: int = 0) -> torch.Tensor:
    """n windows of length L from a random first-order Markov source on K symbols (rows ~ Dirichlet(0.3))."""
    g = torch.Generator().manual_seed(seed)
    gam = torch._standard_gamma(torch.full((K, K), 0.3, dtype=torch.float64), generator=g) + 1e-3
    T = gam / gam.sum(1, keepdim=True)
    x = torch.empty(n, L, dtype=torch.int64)
    x[:, 0] = torch.randint(K, (n,), generator=g)
    for i in range(1, L):
        x[:, i] = torch.multinomial(T[x[:, i - 1]], 1, generator=g).squeeze(1)
    return x


class Timed(nn.Module):
    """Wraps a network and adds the wall time of its forward passes to ``self.seconds``."""

    def __init__(self, net):
        super().__init__()
        self.net, self.seconds = net, 0.0

    def forward(self, *args):
        t0 = time.perf_counter()
        out = self.net(*args)
        self.seconds += time.perf_counter() - t0
        return out


def hand_step(net, opt, sched, data, batch, g, mask_state, profile=None):
    """One step of the minimal masked-diffusion loop; ``profile`` (dict) collects the split."""
    t0 = time.perf_counter()
    x0 = data[torch.randint(data.shape[0], (batch,), generator=g)]
    t = sched.t_min + (1 - sched.t_min) * torch.rand(batch, dtype=torch.float64, generator=g)
    masked = torch.rand(batch, L, dtype=torch.float64, generator=g) < t[:, None]
    xt = torch.where(masked, mask_state, x0)
    feats = nn.functional.one_hot(xt, K + 1).float().flatten(1)
    tf = sched.features(t).float()
    t1 = time.perf_counter()
    logits = net(feats, tf).reshape(batch, L, K)
    t2 = time.perf_counter()
    nll = -torch.log_softmax(logits, -1).gather(2, x0.unsqueeze(-1)).squeeze(-1)
    loss = (torch.where(masked, nll, 0.0).sum(-1) / t.float()).mean() / L
    t3 = time.perf_counter()
    opt.zero_grad(set_to_none=True)
    loss.backward()
    t4 = time.perf_counter()
    opt.step()
    t5 = time.perf_counter()
    if profile is not None:
        for k, v in (("network forward", t2 - t1), ("backward", t4 - t3), ("objective", (t1 - t0) + (t3 - t2)),
                     ("optimiser step", t5 - t4)):
            profile[k] = profile.get(k, 0.0) + v
    return float(loss.detach())


def hand_loop(data, steps, batch, seed):
    torch.manual_seed(seed)
    sched = TimeSchedule(1e-3, 1.0)
    net = TransformerDenoiser(L, K + 1, K, sched.n_features, d_model=64, n_layers=2, n_heads=4)
    opt = torch.optim.Adam(net.parameters(), lr=LR)
    g = torch.Generator().manual_seed(seed)
    t0 = time.perf_counter()
    for _ in range(steps):
        hand_step(net, opt, sched, data, batch, g, K)
    return steps * batch * L / (time.perf_counter() - t0)


def heatwalk_loop(space, data, steps, batch, seed):
    t0 = time.perf_counter()
    heatwalk.fit(space, data, steps=steps, batch_size=batch, lr=LR, seed=seed, progress=False)
    return steps * batch * L / (time.perf_counter() - t0)


def heatwalk_profile(space, data, steps, batch, integrand):
    """Per-step split of heatwalk's objective step (draw + share_loss + backward + Adam) for one integrand."""
    obj = DiscreteELBO(space, TimeSchedule(*space.time_range), integrand=integrand)
    torch.manual_seed(0)
    net = Timed(obj.default_network())
    opt = torch.optim.Adam(net.parameters(), lr=LR)
    g = torch.Generator().manual_seed(0)
    prof = {"network forward": 0.0, "backward": 0.0, "objective": 0.0, "optimiser step": 0.0}
    for _ in range(steps):
        net.seconds = 0.0
        t0 = time.perf_counter()
        x0 = data[torch.randint(data.shape[0], (batch,), generator=g)]
        loss = obj.loss(net, x0, g)
        t1 = time.perf_counter()
        opt.zero_grad(set_to_none=True)
        loss.backward()
        t2 = time.perf_counter()
        opt.step()
        t3 = time.perf_counter()
        prof["network forward"] += net.seconds
        prof["objective"] += (t1 - t0) - net.seconds
        prof["backward"] += t2 - t1
        prof["optimiser step"] += t3 - t2
    return {k: v / steps for k, v in prof.items()}


def hand_profile(data, steps, batch):
    torch.manual_seed(0)
    sched = TimeSchedule(1e-3, 1.0)
    net = TransformerDenoiser(L, K + 1, K, sched.n_features, d_model=64, n_layers=2, n_heads=4)
    opt = torch.optim.Adam(net.parameters(), lr=LR)
    g = torch.Generator().manual_seed(0)
    prof = {}
    for _ in range(steps):
        hand_step(net, opt, sched, data, batch, g, K, prof)
    return {k: v / steps for k, v in prof.items()}


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--steps", type=int, default=20)
    ap.add_argument("--batch", type=int, default=512)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--json", default=str(RESULTS))
    a = ap.parse_args()
    torch.set_num_threads(a.threads)
    space = Categories(K, L, process="absorbing")
    data = invented_windows(20_000)
    # one warm-up step of each, not timed (first-call allocations)
    hand_loop(data, 1, a.batch, 99)
    heatwalk_loop(space, data, 1, a.batch, 99)
    hand, ours = [], []
    for r in range(a.repeats):
        hand.append(hand_loop(data, a.steps, a.batch, r))
        ours.append(heatwalk_loop(space, data, a.steps, a.batch, r))
    h, o = max(hand), max(ours)
    print(f"sequence training: K = {K}, L = {L}, batch {a.batch}, absorbing chain, default transformer, "
          f"{a.steps} steps, threads {a.threads}, best of {a.repeats}")
    print(f"{'loop':<34} {'tokens/s':>10} {'s/step':>8}")
    print(f"{'hand-written masked diffusion':<34} {h:>10.0f} {a.batch * L / h:>8.3f}")
    print(f"{'heatwalk.fit':<34} {o:>10.0f} {a.batch * L / o:>8.3f}")
    print(f"ratio heatwalk / hand-written: {o / h:.3f} (goal >= 0.8)")

    n_prof = max(3, a.steps // 2)
    profiles = {"hand-written": hand_profile(data, n_prof, a.batch),
                "heatwalk (closed form)": heatwalk_profile(space, data, n_prof, a.batch, "auto"),
                "heatwalk (reverse rates)": heatwalk_profile(space, data, n_prof, a.batch, "rates")}
    parts = list(next(iter(profiles.values())))
    print(f"\nper-step profile, seconds (mean of {n_prof} steps)")
    print(f"{'loop':<26}" + "".join(f"{p:>17}" for p in parts) + f"{'total':>9}")
    for name, prof in profiles.items():
        print(f"{name:<26}" + "".join(f"{prof[p]:>17.4f}" for p in parts) + f"{sum(prof.values()):>9.4f}")
    out = {"K": K, "L": L, "batch": a.batch, "steps": a.steps, "repeats": a.repeats, "threads": a.threads,
           "hand_tokens_per_s": h, "heatwalk_tokens_per_s": o, "ratio": o / h, "goal": 0.8,
           "hand_runs": hand, "heatwalk_runs": ours, "profile_seconds_per_step": profiles}
    Path(a.json).parent.mkdir(parents=True, exist_ok=True)
    Path(a.json).write_text(json.dumps(out, indent=2) + "\n")
    print(f"wrote {a.json}")


if __name__ == "__main__":
    main()
