"""Regenerate the example pictures under docs/pictures/: one per kind of space, plus a loss curve and log-likelihoods.

Every data set here is invented for these pictures (no real measurements):

- torsions.png        backbone torsions (phi, psi) of the fictional "lanternfold" peptides
                      (heatwalk.frontend.demo_data), the model's density on a grid, in degrees
- directions.png      arrival directions of three invented meteor showers on S² (two compact radiants
                      and a band along a tilted great circle), sample density on an equal-area map
- rotations.png       attitudes of an invented tumbling sensor buoy: two resting orientations on SO(3)
- compositions.png    the invented daily time budget (sleep, work, leisure) of a night-shift crew
- sequences.png       an invented peptide family of 9–12 residues (padded with "-" to 12) with a conserved
                      motif at positions 4–6
- factors.png         a product space: lanternfold torsions (T²) with an invented residue class (G, P or
                      other) that depends on the fold, one picture per factor (data only, no fit)
- losses.png          the training loss of the torsion model, step by step
- log_likelihoods.png per-point log-likelihoods of held-out torsions and of uniform angles

    python docs/make_pictures.py [--out docs/pictures] [--quick]

Runs in a few minutes on one CPU core (``--quick``: shorter fits and coarser grids, for a check).
"""

from __future__ import annotations

import argparse
import math
import time
from pathlib import Path

import numpy as np
import torch

import heatwalk
from heatwalk.frontend.demo_data import lanternfold_torsions
from heatwalk.frontend.plots import plot, plot_log_likelihoods, plot_losses, save_figure
from heatwalk.spaces import SO3, Categories, Product, Simplex, Sphere, Torus
from heatwalk.spaces.simplex import ilr_inverse
from heatwalk.spaces.so3 import exp_so3

F64 = torch.float64
AMINO_ACIDS = "ACDEFGHIKLMNPQRSTVWY"
PAD = "-"


def meteor_directions(n: int, generator: torch.Generator) -> torch.Tensor:
    """Two compact radiants (heat-kernel draws around fixed centres) and a band along a tilted great circle."""
    space = Sphere(2)
    k = torch.multinomial(torch.tensor([0.4, 0.25, 0.35]), n, replacement=True, generator=generator)
    centres = torch.tensor([[0.45, 0.55, 0.70], [-0.6, -0.2, -0.77]], dtype=F64)
    centres = centres / centres.norm(dim=1, keepdim=True)
    out = torch.empty(n, 3, dtype=F64)
    for j, t in ((0, 0.01), (1, 0.03)):
        idx = (k == j).nonzero().flatten()
        out[idx] = space.sample_forward(centres[j].expand(idx.numel(), 3), t, generator)
    idx = (k == 2).nonzero().flatten()
    lon = 2 * math.pi * torch.rand(idx.numel(), generator=generator, dtype=F64)
    lat = 0.08 * torch.randn(idx.numel(), generator=generator, dtype=F64)
    band = torch.stack([torch.cos(lat) * torch.cos(lon), torch.cos(lat) * torch.sin(lon), torch.sin(lat)], 1)
    tilt = exp_so3(torch.tensor([0.6, 0.0, 0.3], dtype=F64))
    out[idx] = band @ tilt.T
    return space.validate(out)


def buoy_attitudes(n: int, generator: torch.Generator) -> torch.Tensor:
    """Two resting orientations of an invented buoy (IGSO(3) draws at times 0.03 and 0.08)."""
    space = SO3()
    first = torch.rand(n, generator=generator) < 0.6
    centres = exp_so3(torch.tensor([[0.4, -1.2, 0.6], [2.2, 0.5, -0.4]], dtype=F64))
    out = torch.empty(n, 3, 3, dtype=F64)
    for j, (mask, t) in enumerate(((first, 0.03), (~first, 0.08))):
        idx = mask.nonzero().flatten()
        out[idx] = space.sample_forward(centres[j].expand(idx.numel(), 3, 3), t, generator)
    return out


def time_budgets(n: int, generator: torch.Generator) -> torch.Tensor:
    """Shares of (sleep, work, leisure): a logistic-normal mixture of a work-heavy and a rest-heavy day."""
    heavy = torch.rand(n, generator=generator) < 0.65
    mean = torch.where(heavy[:, None], torch.tensor([0.9, 0.5], dtype=F64), torch.tensor([-0.4, -0.6], dtype=F64))
    y = mean + torch.randn(n, 2, generator=generator, dtype=F64) * torch.tensor([0.25, 0.35], dtype=F64)
    # ilr coordinates of (sleep, work, leisure): reorder so that the work-heavy mode sits near "work"
    return Simplex(3).validate(ilr_inverse(y)[:, [2, 0, 1]])


def peptide_family(n: int, rng: np.random.Generator) -> list[str]:
    """9–12 residues padded with "-" to 12: a motif C-G-[DE] at positions 4–6, hydrophobic start, basic end."""
    hydrophobic, acidic = "AILMFVW", "DE"
    out = []
    for _ in range(n):
        s = [rng.choice(list(hydrophobic)) if rng.random() < 0.7 else rng.choice(list(AMINO_ACIDS))
             for _ in range(3)]
        s += ["C" if rng.random() < 0.92 else "S", "G", rng.choice(list(acidic))]
        s += [rng.choice(list(AMINO_ACIDS)) for _ in range(4)]
        s += [rng.choice(list("KR")) if rng.random() < 0.8 else rng.choice(list(AMINO_ACIDS)) for _ in range(2)]
        length = rng.choice([9, 10, 11, 12], p=[0.15, 0.25, 0.3, 0.3])
        out.append("".join(s[:length]).ljust(12, PAD))
    return out


def torsions_with_classes(n: int, rng: np.random.Generator):
    """Lanternfold torsions and a residue class per point: G (glycine) mostly in the fold at phi > 0,
    P (proline) mostly in the seam fold, X (other) elsewhere; returns (Product space, (angles, classes))."""
    space = Product(Torus(2), Categories(3, 1, alphabet="GPX"))
    angles = torch.as_tensor(lanternfold_torsions(n, seed=11))
    right, seam = angles[:, 0] > 0, angles[:, 1].abs() > 2.2
    p = np.where(right.numpy()[:, None], [0.7, 0.05, 0.25], np.where(seam.numpy()[:, None], [0.1, 0.5, 0.4],
                                                                     [0.1, 0.1, 0.8]))
    classes = torch.as_tensor([rng.choice(3, p=row) for row in p], dtype=torch.int64)[:, None]
    return space, (angles, classes)


def fit(space, x, steps: int, seed: int, batch_size: int = 256):
    return heatwalk.fit(space, x, steps=steps, batch_size=batch_size, seed=seed, progress=False, threads=1)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(Path(__file__).resolve().parent / "pictures"))
    parser.add_argument("--quick", action="store_true", help="short fits and coarse grids (a check, not the docs)")
    args = parser.parse_args()
    out = Path(args.out)
    steps, grid, n_samples = (150, 16, 500) if args.quick else (1200, 60, 2000)
    gen, rng = torch.Generator().manual_seed(7), np.random.default_rng(7)
    t0 = time.perf_counter()

    def done(name, fig):
        path = save_figure(fig, out / name, overwrite=True)
        print(f"{path}  {path.stat().st_size / 1024:.0f} KB  ({time.perf_counter() - t0:.0f} s)")

    torus = Torus(2)
    angles = torus.validate(lanternfold_torsions(5000, seed=3))
    train, held = angles[:4000], angles[4000:]
    model = fit(torus, train, steps, 0)
    done("torsions.png", plot(torus, train[:2500], model=model, columns=["phi", "psi"], grid=grid, color_scale="log",
                              size=(760, 640),
                              title="lanternfold backbone torsions: model density and data"))
    done("losses.png", plot_losses(model, size=(800, 420), title="training loss of the torsion model"))
    uniform = torus.random_uniform(1000, gen)
    done("log_likelihoods.png", plot_log_likelihoods({"held-out torsions": model.log_prob(held),
                                                      "uniform angles": model.log_prob(uniform)},
                                                     size=(800, 420), title="torsion model: log-likelihoods"))

    sphere = Sphere(2)
    meteors = meteor_directions(3000, gen)
    samples = fit(sphere, meteors, steps, 1).sample(n_samples, steps=200, seed=1, progress=False)
    done("directions.png", plot(sphere, meteors[:2000], samples, color_scale="log", size=(900, 500),
                                title="invented meteor showers: sample density and observed directions"))

    so3 = SO3()
    attitudes = buoy_attitudes(3000, gen)
    samples = fit(so3, attitudes, steps, 2).sample(n_samples, steps=200, seed=2, progress=False)
    done("rotations.png", plot(so3, attitudes[:2000], samples, size=(1000, 700),
                               title="invented buoy attitudes: data and model samples"))

    simplex = Simplex(3)
    budgets = time_budgets(3000, gen)
    samples = fit(simplex, budgets, steps, 3).sample(n_samples, steps=200, seed=3, progress=False)
    done("compositions.png", plot(simplex, budgets[:1500], samples, columns=["sleep", "work", "leisure"],
                                  grid=20, size=(760, 660), title="invented time budgets: sample density and data"))

    peptides = peptide_family(3000, rng)
    cats = Categories(len(AMINO_ACIDS) + 1, 12, alphabet=AMINO_ACIDS + PAD)
    seq_model = fit(cats, cats.encode(peptides), steps * 2 // 3, 4, batch_size=128)
    samples = seq_model.sample(n_samples, steps=100, seed=4, progress=False)
    done("sequences.png", plot(cats, peptides, samples, pad_symbol=PAD, size=(1100, 720),
                               title="invented peptide family: residue frequencies of data and samples"))
    product_picture(done, rng)


def product_picture(done, rng) -> None:
    space, data = torsions_with_classes(2000, rng)
    done("factors.png", plot(space, data, size=(1500, 640),
                             factor_options=[{"columns": ["phi", "psi"], "color_scale": "log"}, {}],
                             title="Product(Torus(2), Categories(3, 1)): torsions and residue classes (data)"))


if __name__ == "__main__":
    torch.set_num_threads(1)
    main()
