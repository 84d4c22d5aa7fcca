"""Why is the joint product model worse than the factors fitted alone on the cities (S² x R¹)? A screen.

    python benchmarks/product_gap_screen.py VARIANT [--data cities|adk_frames] [--train N] [--heldout N]
        [--steps N]

An exploratory screen (one seed, reduced data), not a benchmark of the defaults: it fits one variant of the
product model of ``benchmarks/product_defaults.py``'s ``cities`` data, or with ``--data adk_frames`` of its
T² x SO(3) residues (the same load and split; a random
``--train`` training and ``--heldout`` held-out points, seeds 1 and 2 as there), prints its held-out NLL per
point (exact divergence) and saves the per-point log-likelihoods beside this file's results as
``results/product_gap_screen/DATA_VARIANT_TRAIN_STEPS.npy``, so paired differences can be taken
(``--compare A B ...`` prints them against the first). Variants, '+'-joined:

- ``default``: the size rule's network for the product (residual, width 256 from 8,000 points, time skip on
  because the R¹ factor's features are unbounded) and the product objective's roles (half the rows diffuse
  every factor; the rest learn conditionals and marginals);
- ``noskip``: the same network without its time skip;
- ``jointF``: a fraction F of the rows diffuse every factor (the objective's roles patched in this process
  for the screen; the library's fraction is 1/2);
- ``additive``: the factored product network, ``network={"factored": True}``
  (:class:`heatwalk.core.networks.factored.FactoredDenoiser`: one residual network per factor on that
  factor's own features, its time skip where its features are unbounded, plus a coupling residual network on
  all features whose output layer starts at zero, outputs summed; first screened as a prototype defined in
  this script, the same modules built in the same order);
- ``independent``: each factor fitted alone at its defaults, the log-likelihoods summed.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))

import product_defaults as pd  # noqa: E402

import heatwalk  # noqa: E402
from heatwalk.core import sizing  # noqa: E402
from heatwalk.core.objectives import product as product_objective  # noqa: E402

OUT = Path(__file__).resolve().parent / "results" / "product_gap_screen"


def patch(variant: str, space, network: dict) -> dict | None:
    """Apply the variant's patches in this process; the network options to pass to fit (None: its own)."""
    parts = variant.split("+")
    for p in parts:
        if p.startswith("joint"):
            extra = (float(p[5:]) - 0.5) / 0.5
            original = product_objective.ProductObjective.random_roles

            def roles(self, n, generator, extra=extra, original=original):
                r = original(self, n, generator)
                keep = torch.rand(n, generator=generator, dtype=torch.float64, device=r.device) < extra
                return torch.where(keep.unsqueeze(-1), torch.zeros_like(r), r)

            product_objective.ProductObjective.random_roles = roles
    if "noskip" in parts:
        network = {**network, "time_skip": False}
    if "additive" in parts:
        network = {**network, "factored": True}
    return network


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("variant", nargs="?")
    ap.add_argument("--data", choices=pd.DATASETS, default="cities")
    ap.add_argument("--train", type=int, default=8000)
    ap.add_argument("--heldout", type=int, default=2000)
    ap.add_argument("--steps", type=int, default=3000)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--compare", nargs="+", help="print paired differences of saved variants against the first")
    a = ap.parse_args(argv)
    if a.compare:
        ref = np.load(OUT / f"{a.data}_{a.compare[0]}_{a.train}_{a.steps}.npy")
        for v in a.compare:
            q = np.load(OUT / f"{a.data}_{v}_{a.train}_{a.steps}.npy")
            d = ref - q                                   # NLL(variant) − NLL(first)
            print(f"| {v} | {-q.mean():.3f} ± {q.std(ddof=1) / len(q) ** 0.5:.3f} | {d.mean():+.3f} ± "
                  f"{d.std(ddof=1) / len(d) ** 0.5:.3f} |")
        return
    torch.set_num_threads(a.threads)
    space, train, held, groups, _ = pd.load(a.data)
    train, _ = pd._subsample(space, train, a.train, pd.SEED + 1)
    held, _ = pd._subsample(space, held, a.heldout, pd.SEED + 2, groups)
    network = sizing.size_rule(space.n_points(train), space.dim, space.bounded_embedding)["network"]
    t0 = time.perf_counter()
    if a.variant == "independent":
        logq = 0
        for i, f in enumerate(space.factors):
            model = heatwalk.fit(f, train[i], seed=pd.SEED, steps=a.steps, progress=False)
            logq = logq + model.log_prob(held[i], **pd.LOG_PROB)["log_prob"].numpy()
    else:
        network = patch(a.variant, space, network)
        kw = {} if network is None else {"network": network}
        model = heatwalk.fit(space, train, seed=pd.SEED, steps=a.steps, progress=False, **kw)
        logq = model.log_prob(held, **pd.LOG_PROB)["log_prob"].numpy()
    OUT.mkdir(parents=True, exist_ok=True)
    np.save(OUT / f"{a.data}_{a.variant}_{a.train}_{a.steps}.npy", logq)
    print(f"{a.data} {a.variant}: held-out NLL {-logq.mean():.4f} ± {logq.std(ddof=1) / len(logq) ** 0.5:.4f}, "
          f"{time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
