"""Invented demo data: backbone torsions of the fictional "lanternfold" peptide family.

The lanternfold peptides are made up for this demo. Their two torsion angles
(phi, psi), in radians, crowd around three curved, banana-shaped modes; one
mode straddles the ±π seam in psi so a model that ignores the torus topology
visibly fails there. Each mode is a curve φ(s) = c_φ + a s, ψ(s) = c_ψ + b s²
with s ~ N(0, 1), plus small isotropic jitter, wrapped to [-π, π).
"""

from __future__ import annotations

import math

import numpy as np

#: (weight, centre phi, centre psi, slope a, curvature b, jitter) for each mode
LANTERNFOLD_MODES = (
    (0.45, -1.3, 2.9, 0.35, -0.25, 0.12),   # crosses the psi = ±π seam
    (0.35, -1.1, -0.6, 0.30, 0.30, 0.10),
    (0.20, 1.0, 0.7, 0.25, -0.35, 0.12),
)


def lanternfold_torsions(n: int, seed: int = 0) -> np.ndarray:
    """n (phi, psi) pairs in radians, wrapped to [-π, π). Shape (n, 2)."""
    rng = np.random.default_rng(seed)
    w = np.array([m[0] for m in LANTERNFOLD_MODES])
    comp = rng.choice(len(w), size=n, p=w / w.sum())
    out = np.empty((n, 2))
    for k, (_, cphi, cpsi, a, b, jit) in enumerate(LANTERNFOLD_MODES):
        idx = np.flatnonzero(comp == k)
        s = rng.standard_normal(idx.size)
        out[idx, 0] = cphi + a * s + jit * rng.standard_normal(idx.size)
        out[idx, 1] = cpsi + b * s**2 + jit * rng.standard_normal(idx.size)
    return (out + math.pi) % (2 * math.pi) - math.pi
