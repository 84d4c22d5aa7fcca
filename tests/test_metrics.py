"""heatwalk.frontend.metrics.mmd: near 0 (within its noise) for two samples of one law, clearly positive for two laws.

The noise scale σ of the unbiased MMD² estimate is the standard deviation over independent
resamples of two same-law samples (fixed seeds). Pass criteria (stated): |MMD²| < 4σ for the
same law (failure rate ~6e-5 if the statistic were Gaussian), MMD² > 10σ for different laws.
Targets from benchmarks/targets.py (their samplers are checked in test_benchmark_targets.py).
"""

import os
import sys

import numpy as np
import pytest

import heatwalk

from heatwalk.frontend.metrics import median_bandwidth, mmd_squared, mmd_with_floor

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "benchmarks"))

import targets  # noqa: E402
from stat_thresholds import sigma_threshold

N = 300

CASES = {
    "torus2": (targets.TorusBanana(), targets.TorusBanana(a=1.0)),        # less curved banana
    "sphere2": (targets.SphereRing(), targets.SphereRing(c=0.6)),         # ring shifted by 0.3 in μ·x
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_mmd_same_law_within_noise_and_different_laws_positive(name):
    p, q = CASES[name]
    space = p.space
    ref = p.sample(N, 0)
    bw = median_bandwidth(space, ref)
    noise = [mmd_squared(space, p.sample(N, 10 + 2 * r), p.sample(N, 11 + 2 * r), bw) for r in range(8)]
    sigma = float(np.std(noise, ddof=1))
    assert sigma > 0
    same = mmd_squared(space, p.sample(N, 1), ref, bw)
    diff = mmd_squared(space, q.sample(N, 2), ref, bw)
    assert abs(same) < sigma_threshold(6e-5) * sigma, (same, sigma)
    assert diff > 10 * sigma, (diff, sigma)
    out = mmd_with_floor(space, q.sample(N, 3), ref, p.sample(N, 4), bandwidth=bw)
    assert out["mmd2"] > 10 * sigma and abs(out["floor"]) < sigma_threshold(6e-5) * sigma, (out, sigma)


def test_circular_w1_closed_form_against_a_linear_program():
    # independent reference: the optimal transport linear program between the two empirical laws with the
    # arc-length cost min(|a - b|, 2π - |a - b|), solved by scipy.optimize.linprog (HiGHS); tolerance 1e-9 rad
    import scipy.optimize

    from heatwalk.frontend.metrics import circle_w1

    rng = np.random.default_rng(4)
    for n, m in ((7, 9), (12, 5), (10, 10)):
        u, v = rng.vonmises(1.0, 1.0, n), rng.vonmises(-2.5, 0.7, m)
        d = np.abs(u[:, None] - v[None, :])
        cost = np.minimum(d, 2 * np.pi - d)
        a_eq = np.zeros((n + m, n * m))
        for i in range(n):
            a_eq[i, i * m:(i + 1) * m] = 1
        for j in range(m):
            a_eq[n + j, j::m] = 1
        b_eq = np.concatenate([np.full(n, 1 / n), np.full(m, 1 / m)])
        lp = scipy.optimize.linprog(cost.ravel(), A_eq=a_eq, b_eq=b_eq, bounds=(0, None), method="highs")
        assert lp.success
        assert abs(circle_w1(u, v) - lp.fun) < 1e-9, (n, m, circle_w1(u, v), lp.fun)
    with pytest.raises(heatwalk.InputError, match="NaN"):
        circle_w1(np.array([0.1, np.nan]), np.array([0.2]))


def test_a_products_metrics_repeat_on_each_factor_alone():
    """per_factor: factor i's metrics are those of the factor's own points (MMD² of the torus part as on the torus
    alone), and the 1-mer TV of a categorical factor is 0.5 Σ_k |p_k − q_k| of the state shares (computed here with
    numpy's bincount)."""
    import torch

    from heatwalk.frontend.evaluation import sample_metrics
    from heatwalk.spaces import Categories, Product, Torus

    g = torch.Generator().manual_seed(0)
    space = Product(Torus(1), Categories(3, 1))
    pts = [(torch.rand(200, 1, generator=g, dtype=torch.float64) * 6 - 3, torch.randint(0, 3, (200, 1), generator=g))
           for _ in range(3)]
    metrics = sample_metrics(space, *pts)
    assert set(metrics["per_factor"]) == {"0", "1"}
    alone = sample_metrics(Torus(1), *(p[0] for p in pts))
    assert metrics["per_factor"]["0"]["mmd_squared"]["samples_vs_half_a"] == alone["mmd_squared"]["samples_vs_half_a"]
    assert "wasserstein1_per_angle_rad" in metrics["per_factor"]["0"]
    p, q = (np.bincount(x[1][:, 0].numpy(), minlength=3) / 200 for x in pts[:2])
    tv = metrics["per_factor"]["1"]["kmer_tv_distance"]["1"]["samples_vs_half_a"]
    assert tv == pytest.approx(0.5 * np.abs(p - q).sum(), abs=1e-12)
