"""MMD² in blocks of rows: the same values as the full kernel matrices, memory linear in n, a subsample cap."""

import numpy as np
import pytest
import torch

from heatwalk.frontend import metrics
from heatwalk.frontend.metrics import mmd_squared, mmd_with_floor
from heatwalk.spaces import SO3, Categories, Product, Torus


def _torus_dist(a, b):
    d = np.abs(a[:, None, :] - b[None, :, :]) % (2 * np.pi)
    return np.sqrt((np.minimum(d, 2 * np.pi - d) ** 2).sum(-1))  # flat-torus geodesic distance


def _so3_dist(a, b):
    tr = np.einsum("ikl,jkl->ij", a, b)  # tr(a_i^T b_j)
    return np.arccos(np.clip((tr - 1) / 2, -1, 1))  # rotation angle of a_i^T b_j


def _hamming(a, b):
    return (a[:, None, :] != b[None, :, :]).sum(-1).astype(np.float64)


def _mmd_reference(dxx, dyy, dxy, h):
    """The unbiased MMD² (Gretton et al. 2012, eq. 3) from full distance matrices, in numpy."""
    k = lambda d: np.exp(-d**2 / (2 * h * h))  # noqa: E731
    n, m = dxx.shape[0], dyy.shape[0]
    kxx, kyy = k(dxx), k(dyy)
    return ((kxx.sum() - np.trace(kxx)) / (n * (n - 1)) + (kyy.sum() - np.trace(kyy)) / (m * (m - 1))
            - 2 * k(dxy).mean())


def _cases():
    g = torch.Generator().manual_seed(3)
    torus, so3, cat = Torus(3), SO3(), Categories(4, 6)
    tx, ty = torus.random_uniform(61, g), torus.random_uniform(47, g)
    rx, ry = so3.random_uniform(53, g), so3.random_uniform(40, g)
    cx, cy = cat.random_uniform(45, g), cat.random_uniform(38, g)
    prod = Product(Torus(3), Categories(4, 6))
    return {
        "torus": (torus, tx, ty, _torus_dist(tx.numpy(), tx.numpy()), _torus_dist(ty.numpy(), ty.numpy()),
                  _torus_dist(tx.numpy(), ty.numpy())),
        "so3": (so3, rx, ry, _so3_dist(rx.numpy(), rx.numpy()), _so3_dist(ry.numpy(), ry.numpy()),
                _so3_dist(rx.numpy(), ry.numpy())),
        "categories": (cat, cx, cy, _hamming(cx.numpy(), cx.numpy()), _hamming(cy.numpy(), cy.numpy()),
                       _hamming(cx.numpy(), cy.numpy())),
        # a product's distance is sqrt(Σ d_i²) over its factors (heatwalk.spaces.Product.dist)
        "product": (prod, (tx[:45], cx), (ty[:38], cy),
                    *[np.sqrt(_torus_dist(a.numpy(), b.numpy()) ** 2 + _hamming(c.numpy(), d.numpy()) ** 2)
                      for (a, c), (b, d) in (((tx[:45], cx), (tx[:45], cx)), ((ty[:38], cy), (ty[:38], cy)),
                                             ((tx[:45], cx), (ty[:38], cy)))]),
    }


@pytest.mark.parametrize("block_pairs", [7, 100, 2**20])
@pytest.mark.parametrize("name", ["torus", "so3", "categories", "product"])
def test_blocked_mmd_equals_the_full_matrix_computation(name, block_pairs, monkeypatch):
    # reference: numpy distance matrices and the U-statistic from the full kernel matrices; agreement to 1e-12
    # absolute (the blocks only change the order of a float64 sum of a few thousand terms below 1)
    space, x, y, dxx, dyy, dxy = _cases()[name]
    monkeypatch.setattr(metrics, "MMD_BLOCK_PAIRS", block_pairs)
    for h in (0.3, 1.0, 2.5):
        assert abs(mmd_squared(space, x, y, h) - _mmd_reference(dxx, dyy, dxy, h)) < 1e-12


def test_blocks_hold_at_most_the_stated_number_of_distances(monkeypatch):
    space = Torus(2)
    g = torch.Generator().manual_seed(0)
    x, y = space.random_uniform(300, g), space.random_uniform(200, g)
    monkeypatch.setattr(metrics, "MMD_BLOCK_PAIRS", 1000)
    sizes = []
    real = space.pairwise_dist

    def spy(a, b, *args):
        out = real(a, b, *args)
        sizes.append(out.numel())
        return out

    monkeypatch.setattr(space, "pairwise_dist", spy)
    mmd_squared(space, x, y, 0.5)
    assert max(sizes) <= 1000 and sum(sizes) == 300 * 300 + 200 * 200 + 300 * 200


def test_mmd_with_floor_subsamples_beyond_the_cap():
    space = Torus(2)
    g = torch.Generator().manual_seed(1)
    s, a, b = space.random_uniform(120, g), space.random_uniform(90, g), space.random_uniform(80, g)
    out = mmd_with_floor(space, s, a, b, bandwidth=0.7, max_points=50, seed=5)
    assert out["subsampled"] and out["n"] == 50 and out["n_a"] == 50
    # the same subsamples drawn by hand (one generator, in the order samples, A, B)
    gen = torch.Generator().manual_seed(5)
    s2, a2, b2 = (z[torch.randperm(z.shape[0], generator=gen)[:50]] for z in (s, a, b))
    assert out["mmd2"] == mmd_squared(space, s2, a2, 0.7) and out["floor"] == mmd_squared(space, b2, a2, 0.7)
    full = mmd_with_floor(space, s, a, b, bandwidth=0.7)
    assert not full["subsampled"] and full["n"] == 80 and full["n_a"] == 90
