"""Sample-quality metrics on a space.

- :func:`mmd_squared` — the squared maximum mean discrepancy with a Gaussian kernel in the
  geodesic distance, k(x, y) = exp(-d(x, y)² / (2 h²)), unbiased U-statistic
  estimate of MMD² (Gretton et al. 2012, JMLR 13, eq. 3). Note that a Gaussian
  kernel in geodesic distance need not be positive definite on every manifold;
  the estimate is still a meaningful two-sample statistic, and it is always
  compared against its noise floor.
  It is computed in blocks of rows (:data:`MMD_BLOCK_PAIRS` kernel values at a
  time), so memory grows linearly in the number of points, not quadratically.
- :func:`mmd_with_floor` — the MMD between model samples and held-out data,
  with the noise floor: the same statistic between two independent target
  samples of the same size. Each set is first cut to a random subsample of at
  most :data:`MMD_MAX_POINTS` points (drawn with ``seed``): the cost is one
  distance per pair of points, and beyond a few thousand points the estimate's
  noise (its standard deviation falls as 1/n under the null) is already far
  below the differences between models that the report is read for.
- :func:`mmd_permutation_z` — MMD² of two sets divided by the standard deviation of the same
  statistic over random relabellings of the pooled points (the permutation null of the two-sample
  test), on at most :data:`PERMUTATION_MAX_POINTS` points of each set: z of a few is within noise.
- :func:`circular_wasserstein` — 1-D Wasserstein-1 distance per angle on the
  circle, in radians, by its closed form (below).
- :func:`kmer_spectrum_distance` — total-variation distance between the k-mer
  frequency spectra of two sets of sequences (k = 1, 2, 3 by default).
- :func:`mean_log_likelihood` — held-out mean log-likelihood in nats.
"""

from __future__ import annotations

import math

import numpy as np
import torch

from heatwalk.errors import InputError
from heatwalk.spaces.base import Space


def pairwise_dist(space: Space, x, y) -> torch.Tensor:
    """The space's distances d(x_i, y_j), shape (n, m) (:meth:`Space.pairwise_dist`)."""
    return space.pairwise_dist(x, y)


def median_bandwidth(space: Space, x: torch.Tensor, n: int = 1000) -> float:
    """Median pairwise geodesic distance of (up to n points of) x: the median heuristic."""
    x = space.take(x, slice(0, n))
    d = pairwise_dist(space, x, x)
    iu = torch.triu_indices(d.shape[0], d.shape[0], offset=1)
    return float(d[iu[0], iu[1]].median())


#: kernel values held at once by :func:`mmd_squared` (rows of x per block = this // number of points of y)
MMD_BLOCK_PAIRS = 2**20
#: largest number of points of each set :func:`mmd_with_floor` uses (a random subsample beyond it)
MMD_MAX_POINTS = 5000


def kernel_sum(space: Space, x, y, g: float, *, skip_diagonal: bool = False) -> torch.Tensor:
    """Σ_ij exp(g · d(x_i, y_j)²) (float64 scalar), over blocks of rows of x; ``skip_diagonal`` leaves out
    the terms i = j (x and y the same set). Memory: about :data:`MMD_BLOCK_PAIRS` kernel values."""
    n, m = space.n_points(x), space.n_points(y)
    rows = max(1, MMD_BLOCK_PAIRS // max(m, 1))
    total = torch.zeros((), dtype=torch.float64)
    for i in range(0, n, rows):
        k = torch.exp(g * pairwise_dist(space, space.take(x, slice(i, i + rows)), y).square())
        total = total + k.sum()
        if skip_diagonal:
            b = k.shape[0]
            total = total - k[torch.arange(b), torch.arange(i, i + b)].sum()
    return total


def mmd_squared(space: Space, x: torch.Tensor, y: torch.Tensor, bandwidth: float) -> float:
    """Unbiased estimate of MMD² (may be slightly negative when the laws agree).

    MMD²_u = Σ_{i≠j} k(x_i, x_j) / (n(n-1)) + Σ_{i≠j} k(y_i, y_j) / (m(m-1)) - 2 Σ_ij k(x_i, y_j) / (nm),
    each sum accumulated over blocks of rows (:func:`kernel_sum`), so memory is linear in n + m.
    """
    n, m = space.n_points(x), space.n_points(y)
    if n < 2 or m < 2:
        raise InputError("MMD² needs at least 2 points in each sample")
    if not bandwidth > 0:
        raise InputError(f"bandwidth must be positive, got {bandwidth}", field="bandwidth")
    g = -0.5 / bandwidth**2
    sxx = kernel_sum(space, x, x, g, skip_diagonal=True) / (n * (n - 1))
    syy = kernel_sum(space, y, y, g, skip_diagonal=True) / (m * (m - 1))
    sxy = kernel_sum(space, x, y, g) / (n * m)
    return float(sxx + syy - 2 * sxy)


def subsample(space: Space, x, max_points: int, generator: torch.Generator):
    """``x`` itself if it has at most ``max_points`` points, else a uniform random subset of that many."""
    n = space.n_points(x)
    if n <= max_points:
        return x
    return space.take(x, torch.randperm(n, generator=generator)[:max_points])


def mmd_with_floor(space: Space, samples: torch.Tensor, heldout_a: torch.Tensor, heldout_b: torch.Tensor,
                   bandwidth: float | None = None, *, max_points: int = MMD_MAX_POINTS, seed: int = 0) -> dict:
    """MMD² of samples vs held-out set A, and the noise floor MMD² of held-out A vs held-out B.

    Each set larger than ``max_points`` is replaced by a random subsample of ``max_points`` points
    (drawn with ``seed``); then ``samples`` is cut to the size of B so both statistics have the same
    sample sizes. Returns a dict with ``mmd2``, ``floor``, ``bandwidth``, ``n`` (points of the samples
    and of B used), ``n_a`` (points of A used) and ``subsampled`` (whether any set was cut to max_points).
    """
    gen = torch.Generator().manual_seed(seed)
    sizes = [space.n_points(z) for z in (samples, heldout_a, heldout_b)]
    samples, heldout_a, heldout_b = (subsample(space, z, max_points, gen) for z in (samples, heldout_a, heldout_b))
    n = min(space.n_points(samples), space.n_points(heldout_b))
    if bandwidth is None:
        bandwidth = median_bandwidth(space, heldout_a)
    first = slice(0, n)
    return {
        "mmd2": mmd_squared(space, space.take(samples, first), heldout_a, bandwidth),
        "floor": mmd_squared(space, space.take(heldout_b, first), heldout_a, bandwidth),
        "bandwidth": bandwidth,
        "n": int(n),
        "n_a": space.n_points(heldout_a),
        "subsampled": max(sizes) > max_points,
    }


#: points of each set used by :func:`mmd_permutation_z` (the pooled kernel matrix is held in memory)
PERMUTATION_MAX_POINTS = 1000


def mmd_permutation_z(space: Space, x, y, bandwidth: float, *, n_permutations: int = 200,
                      max_points: int = PERMUTATION_MAX_POINTS, seed: int = 0) -> dict:
    """MMD² of ``x`` vs ``y`` scaled by its permutation spread: z = MMD²_u / σ_perm.

    The first ``max_points`` points of each set are pooled (N of them) and the N × N Gaussian kernel
    matrix K (the kernel of :func:`mmd_squared`) is formed once. For a split of the pool into
    indicator vectors a (n points) and b (m points), with k the diagonal of K,
    MMD²_u = (aᵀKa − aᵀk)/(n(n−1)) + (bᵀKb − bᵀk)/(m(m−1)) − 2 aᵀKb/(nm)
    (the U-statistic of Gretton et al. 2012, eq. 3). σ_perm is the standard deviation (ddof 1) of
    that statistic over ``n_permutations`` uniformly random splits of the same sizes (drawn with
    ``seed``), all evaluated with one matrix product K·A. Returns ``mmd2`` (of the split given),
    ``sigma_perm``, ``z``, ``p_value`` ((1 + #{null ≥ observed}) / (1 + R)), ``n_x``, ``n_y``.
    """
    if n_permutations < 2:
        raise InputError(f"n_permutations must be at least 2, got {n_permutations}", field="n_permutations")
    x, y = space.take(x, slice(0, max_points)), space.take(y, slice(0, max_points))
    n, m = space.n_points(x), space.n_points(y)
    if n < 2 or m < 2:
        raise InputError("MMD² needs at least 2 points in each sample")
    pooled = space.concat([x, y])
    d = pairwise_dist(space, pooled, pooled).to(torch.float64).numpy()
    k = np.exp(-0.5 * d**2 / bandwidth**2)
    diag = np.diag(k).copy()
    rng = np.random.default_rng(seed)
    splits = np.zeros((n + m, n_permutations + 1))
    splits[:n, 0] = 1.0
    for r in range(1, n_permutations + 1):
        splits[rng.permutation(n + m)[:n], r] = 1.0
    other = 1.0 - splits
    ka = k @ splits
    kb = k.sum(1, keepdims=True) - ka
    aka, bkb, akb = (splits * ka).sum(0), (other * kb).sum(0), (splits * kb).sum(0)
    stats = ((aka - diag @ splits) / (n * (n - 1)) + (bkb - diag @ other) / (m * (m - 1)) - 2 * akb / (n * m))
    observed, null = float(stats[0]), stats[1:]
    sigma = float(np.std(null, ddof=1))
    return {"mmd2": observed, "sigma_perm": sigma, "z": observed / sigma if sigma > 0 else math.inf,
            "p_value": float((1 + (null >= observed).sum()) / (1 + n_permutations)), "n_x": int(n), "n_y": int(m)}


def circle_w1(u: np.ndarray, v: np.ndarray) -> float:
    """Wasserstein-1 distance between the empirical laws of angles ``u`` and ``v`` (radians), arc-length cost.

    Closed form on the circle (Rabin, Delon & Gousseau 2011, "Transportation distances on the circle",
    J. Math. Imaging Vis. 41, Prop. 1; also Cabrelli & Molter 1995): with F and G the CDFs of the two laws
    from any cut point, W1 = min_α ∫ |F(θ) - G(θ) - α| dθ over the circle, and the minimum is at a
    weighted median α of F - G, weighted by arc length. F - G is piecewise constant between the pooled
    sorted points, so this is a sort and a weighted median.
    """
    u = np.sort(np.mod(np.asarray(u, dtype=np.float64), 2 * math.pi))
    v = np.sort(np.mod(np.asarray(v, dtype=np.float64), 2 * math.pi))
    if u.size == 0 or v.size == 0:
        raise InputError("circular Wasserstein distance: both samples need at least one angle")
    if not (np.isfinite(u).all() and np.isfinite(v).all()):
        raise InputError("circular Wasserstein distance: an angle is NaN or infinite (samples of a broken model?)")
    grid = np.concatenate([u, v])
    order = np.argsort(grid, kind="mergesort")
    pts = grid[order]
    step = np.where(order < u.size, 1.0 / u.size, -1.0 / v.size)
    diff = np.cumsum(step)                                  # F - G on [pts[k], pts[k + 1])
    lengths = np.diff(np.append(pts, pts[0] + 2 * math.pi))  # the last interval wraps around
    idx = np.argsort(diff, kind="mergesort")
    cum = np.cumsum(lengths[idx])
    alpha = diff[idx][np.searchsorted(cum, 0.5 * cum[-1])]  # arc-length weighted median of F - G
    return float(np.sum(lengths * np.abs(diff - alpha)))


def circular_wasserstein(x: torch.Tensor, y: torch.Tensor) -> list[float]:
    """Wasserstein-1 distance (radians) between the laws of each angle column of x and y (closed form)."""
    if x.dim() != 2 or y.dim() != 2 or x.shape[1] != y.shape[1]:
        raise InputError(f"expected two (n, k) angle tables, got {tuple(x.shape)} and {tuple(y.shape)}")
    return [circle_w1(x[:, j].numpy(), y[:, j].numpy()) for j in range(x.shape[1])]


def mean_log_likelihood(log_probs: torch.Tensor) -> dict:
    """Mean and standard error of held-out log-likelihoods (nats per point)."""
    lp = torch.as_tensor(log_probs, dtype=torch.float64)
    return {"mean": float(lp.mean()), "stderr": float(lp.std() / math.sqrt(lp.numel())), "n": int(lp.numel())}


def kmer_spectrum_distance(x: torch.Tensor, y: torch.Tensor, n_states: int, k: int) -> float:
    """Total-variation distance (1/2) Σ |f_x(w) - f_y(w)| between k-mer frequencies of two sequence sets.

    ``x``, ``y``: int64 (n, L) codes in [0, n_states); k-mers are counted at every offset of every sequence.
    """
    if x.dim() != 2 or y.dim() != 2 or x.shape[1] != y.shape[1]:
        raise InputError(f"expected two (n, L) code tables, got {tuple(x.shape)} and {tuple(y.shape)}")
    if not 1 <= k <= x.shape[1]:
        raise InputError(f"k must be in [1, L={x.shape[1]}], got {k}", field="k")

    def spectrum(z):
        idx = torch.zeros(z.shape[0], z.shape[1] - k + 1, dtype=torch.int64)
        for j in range(k):
            idx = idx * n_states + z[:, j:z.shape[1] - k + 1 + j]
        counts = torch.bincount(idx.reshape(-1), minlength=n_states**k).double()
        return counts / counts.sum()

    return float(0.5 * (spectrum(x) - spectrum(y)).abs().sum())
