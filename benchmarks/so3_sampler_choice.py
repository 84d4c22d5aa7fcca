"""The SO(3) bimodal target of ``fit_quality.py``: MMD z of fitted models' samples by sampler and steps.

    python benchmarks/so3_sampler_choice.py [--out FILE]

The fits are the fit-quality benchmark's (its target, settings, sizes: 20,000 training points, 3,000 steps,
MLP 256×3, time range [1e-3, 10]) with three fit seeds, the benchmark's own first; only the sampler that draws
the 1,000 samples, its number of reverse steps and the sample seed (four per fit) vary. z = MMD² (geodesic
Gaussian kernel, median bandwidth) of the samples against 1,000 held-out target points, over σ0, the standard
deviation of MMD² between independent target samples of the same sizes (10 pairs), as in ``fit_quality.py``;
12 draws of exact target samples give the spread of z under a perfect model (σ0 rests on 10 pairs only, so
|z| > 2 is not rare even then). The summary is the mean z ± its standard error over the 12 draws and the
largest |z|; a sampler is within noise when its mean z is within about two standard errors of the exact
draws' mean z.
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
#: fit_quality.py's 100 sampling steps and Model.sample's default 500
STEPS = (100, 500)
#: fits: fit_quality.py's seed first, then two more; samples: four draws of each sampler per fit
FIT_SEEDS = (fq.SEED, fq.SEED + 11, fq.SEED + 22)
SAMPLE_SEEDS = (fq.SEED + 5, fq.SEED + 105, fq.SEED + 205, fq.SEED + 305)
#: as many exact target draws as model draws (3 x 4), the reference spread of z under a perfect model
EXACT_SEEDS = tuple(1000 + 7 * k for k in range(len(FIT_SEEDS) * len(SAMPLE_SEEDS)))


def summary(values) -> dict:
    v = np.asarray(values, dtype=float)
    return {"mean": float(v.mean()), "se": float(v.std(ddof=1) / np.sqrt(len(v))), "max_abs": float(np.abs(v).max()),
            "n": int(len(v))}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--out", type=Path, default=Path(__file__).parent / "results" / "so3_sampler_choice.json")
    a = ap.parse_args()
    target = targets.SO3Bimodal()
    cfg, sz = fq.SETTINGS["so3_bimodal"], fq.SIZES["default"]
    sp = target.space
    seed = fq.SEED
    train = target.sample(sz["n_train"], seed + 1)
    held_a = target.sample(sz["n_mmd"], seed + 3)
    bw = median_bandwidth(sp, held_a)
    noise = [mmd_squared(sp, target.sample(sz["n_mmd"], 100 + 2 * r), target.sample(sz["n_mmd"], 101 + 2 * r), bw)
             for r in range(sz["n_noise"])]
    sigma0 = float(np.std(noise, ddof=1))
    exact = [mmd_squared(sp, target.sample(sz["n_mmd"], s), held_a, bw) / sigma0 for s in EXACT_SEEDS]
    print(f"sigma0 {sigma0:.3g}; exact target samples z = {', '.join(f'{z:.2f}' for z in exact)}", flush=True)
    print(f"{'fit seed':>8s} {'sampler':22s} {'steps':>5s} {'z per sample seed':>30s} {'s/draw':>7s}")
    rows, fits = [], []
    for fit_seed in FIT_SEEDS:
        t0 = time.perf_counter()
        model = heatwalk.fit(sp, train, steps=cfg["steps"], batch_size=sz["batch"], seed=fit_seed, progress=False,
                             network={"hidden": cfg["hidden"], "depth": cfg["depth"], "residual": False},
                             time_range=cfg["time_range"])
        fits.append({"seed": fit_seed, "fit_seconds": time.perf_counter() - t0})
        for sampler in SAMPLERS:
            for steps in STEPS:
                t0 = time.perf_counter()
                zs = [mmd_squared(sp, model.sample(sz["n_mmd"], steps=steps, sampler=sampler, seed=s, progress=False),
                                  held_a, bw) / sigma0 for s in SAMPLE_SEEDS]
                per_draw = (time.perf_counter() - t0) / len(SAMPLE_SEEDS)
                rows.append({"fit_seed": fit_seed, "sampler": sampler, "steps": steps, "z": zs, "seconds": per_draw})
                print(f"{fit_seed:8d} {sampler:22s} {steps:5d} {' '.join(f'{z:6.2f}' for z in zs):>30s} "
                      f"{per_draw:7.1f}", flush=True)
    table = {}
    print(f"\n{'sampler':22s} {'steps':>5s} {'mean z ± se':>14s} {'max |z|':>8s}  (over {len(FIT_SEEDS)} fits x "
          f"{len(SAMPLE_SEEDS)} draws)")
    for sampler in SAMPLERS:
        for steps in STEPS:
            s = summary([z for r in rows if r["sampler"] == sampler and r["steps"] == steps for z in r["z"]])
            table[f"{sampler}/{steps}"] = s
            print(f"{sampler:22s} {steps:5d} {s['mean']:7.2f} ± {s['se']:4.2f} {s['max_abs']:8.2f}")
    s = summary(exact)
    print(f"{'exact target samples':22s} {'':5s} {s['mean']:7.2f} ± {s['se']:4.2f} {s['max_abs']:8.2f}")
    with atomic_path(a.out) as tmp:
        tmp.write_text(json.dumps({"sigma0": sigma0, "exact_z": exact, "exact_seeds": EXACT_SEEDS, "fits": fits,
                                   "fit_seeds": FIT_SEEDS,
                                   "sample_seeds": SAMPLE_SEEDS, "default_sampler": model.objective.default_sampler,
                                   "rows": rows, "summary": table}, indent=1))


if __name__ == "__main__":
    torch.set_num_threads(1)
    main()
