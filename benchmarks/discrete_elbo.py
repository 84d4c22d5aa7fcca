"""Discrete ELBO fit quality and training speed on stationary Markov chain sources with known entropy.

For each (process, architecture) the model is fitted to sequences of a
stationary Markov chain on K states (L positions), and the table reports the
held-out ELBO against the source's exact NLL on the same sequences (the
entropy of the source, estimated without Monte Carlo error in the model), the
gap, and the training throughput in tokens per second.

    python benchmarks/discrete_elbo.py [--steps 2000] [--threads 1] [--K 4] [--L 12]

The source's exact NLL is -log π(x_1) - Σ log T(x_i, x_{i+1}); its per-token
limit for long sequences is the entropy rate -Σ_i π_i Σ_j T_ij log T_ij.
"""

from __future__ import annotations

import argparse
import math
import time

import torch

import heatwalk
from heatwalk.spaces import Categories


def markov_source(K: int, seed: int = 0, concentration: float = 0.5):
    """A random K-state transition matrix (rows ~ Dirichlet) and its stationary law."""
    g = torch.Generator().manual_seed(seed)
    gam = torch._standard_gamma(torch.full((K, K), concentration, dtype=torch.float64), generator=g) + 1e-3
    T = gam / gam.sum(1, keepdim=True)
    w, v = torch.linalg.eig(T.T)
    pi = v[:, w.real.argmax()].real
    return T, pi / pi.sum()


def sample_chain(T, pi, n: int, L: int, g: torch.Generator) -> torch.Tensor:
    x = torch.empty(n, L, dtype=torch.int64)
    x[:, 0] = torch.multinomial(pi.expand(n, -1), 1, generator=g).squeeze(1)
    for i in range(1, L):
        x[:, i] = torch.multinomial(T[x[:, i - 1]], 1, generator=g).squeeze(1)
    return x


def chain_nll(T, pi, x) -> torch.Tensor:
    return -(torch.log(pi[x[:, 0]]) + torch.log(T[x[:, :-1], x[:, 1:]]).sum(1))


def run(process: str, architecture: str, K: int, L: int, steps: int, batch_size: int, seed: int = 0) -> dict:
    """Fit one model; return the numbers of one table row (nats/token unless stated)."""
    T, pi = markov_source(K, seed)
    g = torch.Generator().manual_seed(seed + 1)
    train, test = sample_chain(T, pi, 20000, L, g), sample_chain(T, pi, 2000, L, g)
    space = Categories(K, L, process=process)
    model = heatwalk.fit(space, train, steps=steps, batch_size=batch_size, lr=2e-3, ema_decay=0.995, seed=seed,
                         network={"architecture": architecture}, progress=False)
    est = model.elbo(test, n_time_samples=16)
    exact = float(chain_nll(T, pi, test).mean()) / L
    rate = float(-(pi[:, None] * T * T.log()).sum())
    return {
        "process": process, "network": architecture,
        "elbo": est.nats_per_token, "elbo_se": est.bits_per_token_stderr * math.log(2),
        "exact_nll": exact, "entropy_rate": rate, "gap": est.nats_per_token - exact,
        "bits_per_token": est.bits_per_token,
        "tokens_per_s": steps * batch_size * L / model.record["train_seconds"],
    }


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--steps", type=int, default=2000)
    ap.add_argument("--batch-size", type=int, default=256)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--K", type=int, default=4)
    ap.add_argument("--L", type=int, default=12)
    args = ap.parse_args()
    torch.set_num_threads(args.threads)
    head = f"{'process':<10} {'network':<12} {'ELBO':>8} {'±se':>6} {'exact':>8} {'gap':>7} {'bits/tok':>9} {'tokens/s':>10}"
    print(f"K={args.K} L={args.L} steps={args.steps} batch={args.batch_size} threads={args.threads}  (nats/token)")
    print(head)
    for process in ("absorbing", "uniform"):
        for arch in ("mlp", "transformer"):
            t0 = time.perf_counter()
            r = run(process, arch, args.K, args.L, args.steps, args.batch_size)
            print(f"{r['process']:<10} {r['network']:<12} {r['elbo']:8.4f} {r['elbo_se']:6.4f} {r['exact_nll']:8.4f} "
                  f"{r['gap']:7.4f} {r['bits_per_token']:9.4f} {r['tokens_per_s']:10.0f}   ({time.perf_counter() - t0:.0f} s)",
                  flush=True)


if __name__ == "__main__":
    main()
