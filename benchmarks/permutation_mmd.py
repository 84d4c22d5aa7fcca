"""MMD between model samples and held-out data on a space, scaled by its permutation spread.

MMD² is the unbiased U-statistic (Gretton et al. 2012, JMLR 13, eq. 3) with the Gaussian
kernel k(x, y) = exp(-d(x, y)² / (2 h²)) in the space's distance ``space.dist`` (geodesic
distance on T², S², SO(3); Aitchison distance on the simplex) and bandwidth h = the median
pairwise distance of the held-out sample (median heuristic, common practice).

Real data have no exact sampler, so the noise scale is not taken from fresh target draws:
z = MMD² / σ_perm, where σ_perm is the standard deviation of the same statistic over R random
relabellings of the pooled sample (the permutation null of the two-sample test). z near 0
(within a few units) means the samples cannot be told from the held-out set at this size.
Only public space methods (``dist``, ``ambient_shape``) are used.
"""

from __future__ import annotations

import numpy as np
import torch


def pairwise_dist(space, x, y, chunk: int = 200):
    """Distances d(x_i, y_j), shape (n, m), float64 numpy, computed ``chunk`` rows at a time."""
    shape = tuple(space.ambient_shape)
    out = []
    for i in range(0, x.shape[0], chunk):
        xi = x[i:i + chunk]
        a = xi.reshape(xi.shape[0], 1, *shape).expand(xi.shape[0], y.shape[0], *shape)
        b = y.reshape(1, y.shape[0], *shape).expand_as(a)
        d = space.dist(a.reshape(-1, *shape), b.reshape(-1, *shape)).reshape(xi.shape[0], y.shape[0])
        out.append(d.to(torch.float64).numpy())
    return np.concatenate(out, axis=0)


def median_bandwidth(space, x) -> float:
    """Median of the pairwise distances of ``x`` (i < j)."""
    d = pairwise_dist(space, x, x)
    return float(np.median(d[np.triu_indices(len(x), k=1)]))


def _mmd2(k, a, b):
    """Unbiased MMD² from the pooled kernel matrix ``k`` and index sets a, b."""
    kaa, kbb, kab = k[np.ix_(a, a)], k[np.ix_(b, b)], k[np.ix_(a, b)]
    n, m = len(a), len(b)
    return ((kaa.sum() - np.trace(kaa)) / (n * (n - 1)) + (kbb.sum() - np.trace(kbb)) / (m * (m - 1))
            - 2 * kab.mean())


def mmd_z(space, samples, heldout, bandwidth: float, n_permutations: int, seed: int) -> dict:
    """MMD² of ``samples`` vs ``heldout``, its permutation spread σ_perm and z = MMD² / σ_perm."""
    if not bandwidth > 0:
        raise ValueError(f"bandwidth must be positive, got {bandwidth}")
    pooled = torch.cat([samples, heldout], dim=0)
    k = np.exp(-0.5 * pairwise_dist(space, pooled, pooled) ** 2 / bandwidth**2)
    n = samples.shape[0]
    idx = np.arange(pooled.shape[0])
    stat = _mmd2(k, idx[:n], idx[n:])
    rng = np.random.default_rng(seed)
    null = []
    for _ in range(n_permutations):
        p = rng.permutation(idx)
        null.append(_mmd2(k, p[:n], p[n:]))
    sigma = float(np.std(null, ddof=1))
    return {"mmd2": float(stat), "sigma_perm": sigma, "z": float(stat / sigma),
            "p_value": float((1 + sum(v >= stat for v in null)) / (1 + n_permutations)),
            "n_samples": int(n), "n_heldout": int(heldout.shape[0]), "bandwidth": bandwidth}
