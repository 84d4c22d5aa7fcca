"""The SO(3) bimodal target of ``fit_quality.py``: MMD z of one fitted model's samples by sampler and steps.

    python benchmarks/so3_sampler_choice.py [--out FILE]

The fit is the fit-quality benchmark's own (its target, settings, sizes and seeds: 20,000 training points,
3,000 steps, MLP 256×3, time range [1e-3, 10]); only the sampler that draws the 1,000 samples and its number
of reverse steps vary. z = MMD² (geodesic Gaussian kernel, median bandwidth) of the samples against 1,000
held-out target points, over σ0, the standard deviation of MMD² between independent target samples of the
same sizes (10 pairs), as in ``fit_quality.py``; exact target samples give the noise level.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))

import fit_quality as fq  # noqa: E402
import targets  # noqa: E402

import heatwalk  # noqa: E402
from heatwalk.frontend.metrics import median_bandwidth, mmd_squared  # noqa: E402
from heatwalk.io.atomic import atomic_path  # noqa: E402

SAMPLERS = ("geodesic_random_walk", "predictor_corrector", "probability_flow")
STEPS = (100, 400)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--out", type=Path, default=Path(__file__).parent / "results" / "so3_sampler_choice.json")
    a = ap.parse_args()
    target = targets.SO3Bimodal()
    cfg, sz, seed = fq.SETTINGS["so3_bimodal"], fq.SIZES["default"], fq.SEED
    sp = target.space
    train = target.sample(sz["n_train"], seed + 1)
    held_a = target.sample(sz["n_mmd"], seed + 3)
    bw = median_bandwidth(sp, held_a)
    noise = [mmd_squared(sp, target.sample(sz["n_mmd"], 100 + 2 * r), target.sample(sz["n_mmd"], 101 + 2 * r), bw)
             for r in range(sz["n_noise"])]
    sigma0 = float(np.std(noise, ddof=1))
    t0 = time.perf_counter()
    model = heatwalk.fit(sp, train, steps=cfg["steps"], batch_size=sz["batch"], seed=seed, progress=False,
                         network={"hidden": cfg["hidden"], "depth": cfg["depth"]}, time_range=cfg["time_range"])
    fit_seconds = time.perf_counter() - t0
    exact_z = mmd_squared(sp, target.sample(sz["n_mmd"], seed + 5), held_a, bw) / sigma0
    rows = []
    print(f"fit {fit_seconds:.0f} s; default sampler {model.objective.default_sampler}; sigma0 {sigma0:.3g}; "
          f"exact target samples z = {exact_z:.2f}")
    print(f"{'sampler':22s} {'steps':>5s} {'z':>7s} {'seconds':>8s}")
    for sampler in SAMPLERS:
        for steps in STEPS:
            t0 = time.perf_counter()
            x = model.sample(sz["n_mmd"], steps=steps, sampler=sampler, seed=seed + 5, progress=False)
            z = mmd_squared(sp, x, held_a, bw) / sigma0
            rows.append({"sampler": sampler, "steps": steps, "z": z, "seconds": time.perf_counter() - t0})
            print(f"{sampler:22s} {steps:5d} {z:7.2f} {rows[-1]['seconds']:8.1f}")
    with atomic_path(a.out) as tmp:
        tmp.write_text(json.dumps({"sigma0": sigma0, "exact_z": exact_z, "fit_seconds": fit_seconds,
                                   "default_sampler": model.objective.default_sampler, "rows": rows}, indent=1))


if __name__ == "__main__":
    torch.set_num_threads(1)
    main()
