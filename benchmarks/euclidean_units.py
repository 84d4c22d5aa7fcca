"""R^d data in its own units: the flow scaled to the data (the default) against the unscaled flow.

    python benchmarks/euclidean_units.py [--steps N] [--out FILE]

Two invented laws of known density, given in units where they are neither centred nor of unit spread:

- ``narrow_1d``: N(4.5, 0.3²) (a log10 population of a few tens of thousands, say);
- ``mixture_2d``: an equal mixture of N((25, 40), diag(4², 9²)) and N((38, 20), diag(6², 3²)) (positions in Å).

For each, 4,000 training and 1,000 held-out draws (seed 0), ``heatwalk.fit`` at its defaults with ``steps``
(default 1,500): ``scaled`` is ``Euclidean(d)`` (fit sets loc and scale from the data), ``unscaled`` is
``Euclidean(d, loc=0, scale=1)`` (the flow before it was scaled: N(x_0, t I), prior N(0, t_max I)). Printed:
held-out NLL minus the exact NLL (scipy.stats log-densities), nats per point, with the standard error of the
paired difference, and fit seconds.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np
import scipy.stats
import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))

from real_data import versions, write_json  # noqa: E402

import heatwalk  # noqa: E402
from heatwalk.spaces import Euclidean  # noqa: E402

N_TRAIN, N_HELD, SEED = 4000, 1000, 0


def narrow_1d(rng, n):
    law = scipy.stats.norm(4.5, 0.3)
    x = law.rvs(size=(n, 1), random_state=rng)
    return x, law.logpdf(x[:, 0])


def mixture_2d(rng, n):
    comps = [scipy.stats.multivariate_normal([25.0, 40.0], np.diag([16.0, 81.0])),
             scipy.stats.multivariate_normal([38.0, 20.0], np.diag([36.0, 9.0]))]
    which = rng.integers(0, 2, n)
    x = np.stack([comps[k].rvs(random_state=rng) for k in which])
    logp = np.logaddexp(comps[0].logpdf(x), comps[1].logpdf(x)) - math.log(2.0)
    return x, logp


LAWS = {"narrow_1d": narrow_1d, "mixture_2d": mixture_2d}


def run(steps: int) -> dict:
    out = {}
    for name, draw in LAWS.items():
        rng = np.random.default_rng(SEED)
        x, _ = draw(rng, N_TRAIN)
        y, exact = draw(rng, N_HELD)
        d = x.shape[1]
        rows = {}
        for label, space in (("scaled", Euclidean(d)), ("unscaled", Euclidean(d, loc=0.0, scale=1.0))):
            t0 = time.perf_counter()
            model = heatwalk.fit(space, torch.as_tensor(x), steps=steps, seed=SEED, progress=False)
            seconds = time.perf_counter() - t0
            excess = -model.log_prob(torch.as_tensor(y))["log_prob"].numpy() + exact
            rows[label] = {"excess_nll": float(excess.mean()), "se": float(excess.std(ddof=1) / math.sqrt(len(excess))),
                           "fit_seconds": seconds, "space": repr(model.space)}
            print(f"{name:11s} {label:9s} NLL − exact {rows[label]['excess_nll']:+.4f} ± {rows[label]['se']:.4f}  "
                  f"({seconds:.0f} s)", flush=True)
        out[name] = rows
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--steps", type=int, default=1500)
    ap.add_argument("--out", type=Path, default=Path(__file__).resolve().parent / "results" / "euclidean_units.json")
    args = ap.parse_args(argv)
    torch.set_num_threads(1)
    results = run(args.steps)
    print("\n| law | scaled: NLL − exact | unscaled: NLL − exact | unscaled − scaled |\n|---|---|---|---|")
    for name, r in results.items():
        s, u = r["scaled"], r["unscaled"]
        print(f"| {name} | {s['excess_nll']:+.4f} ± {s['se']:.4f} | {u['excess_nll']:+.4f} ± {u['se']:.4f} | "
              f"{u['excess_nll'] - s['excess_nll']:+.4f} |")
    write_json(args.out, json.loads(json.dumps({"steps": args.steps, "versions": versions(), "results": results})))
    print(f"wrote {args.out}")


if __name__ == "__main__":
    main()
