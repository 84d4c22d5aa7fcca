"""How much the real-data benchmark's MMD z of one sample draw varies: heatwalk's samples over many draws
against as many random subsets of the training points.

    python benchmarks/real_data_draws.py [--data sphere] [--draws 20] [--out FILE] [--progress]

``benchmarks/real_data.py`` reports one MMD z per model: 1,000 samples (sample seed 5) against 1,000
held-out points, with the permutation z of ``benchmarks/permutation_mmd.py`` (geodesic Gaussian kernel,
bandwidth the median distance of the held-out points, 100 permutations). This script fits heatwalk exactly
as that benchmark does in full mode (``heatwalk.fit(space, train, seed=0)``, every other argument at its
default, one torch thread), then computes the same z for the benchmark's own draw (seed 5) and for
``--draws`` more sample draws (seeds 1000, 1001, ...), and, as the reference a perfect model would give, for
as many random subsets of 1,000 training points (numpy seeds 0, 1, ...) against the same held-out points.
The summary is the mean, standard deviation and largest z of each; the draws differ only in their seeds.
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

import heatwalk  # noqa: E402
import permutation_mmd  # noqa: E402
import real_data  # noqa: E402
import real_datasets  # noqa: E402

N_MMD, N_PERM = real_data.MODES["full"]["n_mmd"], real_data.MODES["full"]["n_perm"]
BENCHMARK_SAMPLE_SEED = real_data.SEED + 5
DRAW_SEEDS_FROM = 1000


def summary(values) -> dict:
    v = np.asarray(values, dtype=float)
    return {"mean": float(v.mean()), "sd": float(v.std(ddof=1)), "max": float(v.max()), "n": int(len(v))}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--data", choices=real_data.ORDER, default="sphere")
    ap.add_argument("--draws", type=int, default=20)
    ap.add_argument("--out", type=Path, default=None, help="default: results/real_data_draws_DATA.json")
    ap.add_argument("--progress", action="store_true")
    a = ap.parse_args()
    torch.set_num_threads(1)
    out = a.out or real_data.RESULTS / f"real_data_draws_{a.data}.json"
    space = real_data.make_space(a.data)
    data = real_datasets.load(a.data, space)
    train, held = data["train"], data["heldout"]
    held_a, _ = real_data.subsample(held, N_MMD, real_data.SEED + 3)
    bw = permutation_mmd.median_bandwidth(space, held_a)

    def z_of(points):
        return permutation_mmd.mmd_z(space, points[:N_MMD], held_a, bw, N_PERM, real_data.SEED + 8)["z"]

    t0 = time.perf_counter()
    model = heatwalk.fit(space, train, seed=real_data.SEED, progress=a.progress)
    fit_seconds = time.perf_counter() - t0
    benchmark_z = z_of(model.sample(N_MMD, seed=BENCHMARK_SAMPLE_SEED, progress=False))
    model_z, train_z = [], []
    for k in range(a.draws):
        model_z.append(z_of(model.sample(N_MMD, seed=DRAW_SEEDS_FROM + k, progress=False)))
        idx = np.sort(np.random.default_rng(k).choice(train.shape[0], N_MMD, replace=False))
        train_z.append(z_of(train[torch.as_tensor(idx)]))
        print(f"draw {k:2d}: z model {model_z[-1]:6.2f}   z training subset {train_z[-1]:6.2f}", flush=True)
    result = {"data": a.data, "label": real_data.LABELS[a.data], "n_mmd": N_MMD, "n_permutations": N_PERM,
              "bandwidth": bw, "fit_seconds": fit_seconds, "steps": model.record["steps"],
              "network": model.network.config(), "benchmark_draw_z": benchmark_z,
              "model_z": summary(model_z), "training_subset_z": summary(train_z),
              "model_z_values": model_z, "training_subset_z_values": train_z,
              "versions": real_data.versions()}
    real_data.write_json(out, result)
    m, t = result["model_z"], result["training_subset_z"]
    print(f"{result['label']}: the benchmark's draw (seed {BENCHMARK_SAMPLE_SEED}) z = {benchmark_z:.2f}")
    print(f"  heatwalk, {m['n']} draws: z mean {m['mean']:.2f}, sd {m['sd']:.2f}, max {m['max']:.2f}")
    print(f"  training subsets, {t['n']}: z mean {t['mean']:.2f}, sd {t['sd']:.2f}, max {t['max']:.2f}")
    print(f"written {out}")


if __name__ == "__main__":
    main()
