"""The conditional benchmark's targets (benchmarks/conditional_targets.py) and its mixture conditional.

Entropies are compared with independent computations: mpmath quadrature at 30 digits, and the periodic
trapezoid rule on a grid over T² (spectrally accurate for smooth periodic integrands: with 400 points per
angle its error is far below the 1e-9 tolerance for these laws, whose densities are analytic in a strip
of half-width >= -log 0.7 ≈ 0.36), plus a Monte Carlo check (-mean log p over the target's own draws,
within 4 standard errors: failure rate 6e-5). Samplers: KS tests against CDFs from scipy.stats
(p-value > 1e-3: failure rate 1e-3 per test under the null).
"""

import math
import os
import sys

import mpmath
import numpy as np
import scipy.stats
import torch

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "benchmarks"))

import conditional_quality as cq  # noqa: E402
import conditional_targets as ct  # noqa: E402
from stat_thresholds import p_value_threshold, sigma_threshold  # noqa: E402

N_GRID = 400
GRID = -math.pi + 2 * math.pi * np.arange(N_GRID) / N_GRID


def torus_grid_entropy_and_mass(law):
    phi, psi = np.meshgrid(GRID, GRID, indexing="ij")
    lp = law.log_prob(np.stack([phi.ravel(), psi.ravel()], 1))
    cell = (2 * math.pi / N_GRID) ** 2
    return float(-(np.exp(lp) * lp).sum() * cell), float(np.exp(lp).sum() * cell)


def mp_circle_entropy(log_density):
    mpmath.mp.dps = 30
    return float(mpmath.quad(lambda th: -mpmath.exp(log_density(th)) * log_density(th),
                             np.linspace(-math.pi, math.pi, 9).tolist()))


def test_wrapped_cauchy_density_entropy_and_sampler():
    law = ct.WrappedCauchy(0.5, 0.7)
    th = np.linspace(-3, 3, 7)
    # scipy.stats.wrapcauchy (support [0, 2π), c = ρ) on the shifted angle; tolerance 1e-12
    ref = scipy.stats.wrapcauchy.logpdf(np.remainder(th - law.mu, 2 * math.pi), law.rho)
    assert np.abs(law.log_prob(th) - ref).max() < 1e-12
    mpl = lambda t: mpmath.log((1 - mpmath.mpf(law.rho) ** 2) / (2 * mpmath.pi * (  # noqa: E731
        1 + mpmath.mpf(law.rho) ** 2 - 2 * law.rho * mpmath.cos(t - law.mu))))
    assert abs(law.entropy() - mp_circle_entropy(mpl)) < 1e-10  # closed form vs mpmath quadrature
    x = law.sample(5000, np.random.default_rng(1))
    cdf = scipy.stats.wrapcauchy(law.rho).cdf
    assert scipy.stats.kstest(np.remainder(x - law.mu, 2 * math.pi), cdf).pvalue > p_value_threshold(1e-3)


def test_circular_mixture_entropy():
    law = ct.MixedCategories().laws[2]
    (w1, w2), (a, b) = law.weights, law.laws

    def mpl(t):  # the two-mode von Mises mixture in mpmath (independent of the numpy code)
        comp = lambda c: mpmath.exp(c.kappa * mpmath.cos(t - c.mu)) / (2 * mpmath.pi * mpmath.besseli(0, c.kappa))  # noqa: E731,E501
        return mpmath.log(w1 * comp(a) + w2 * comp(b))

    assert abs(law.entropy() - mp_circle_entropy(mpl)) < 1e-9  # scipy quad vs mpmath at 30 digits


def test_torus_class_entropies_normalisation_and_monte_carlo():
    tgt = ct.TorusClasses()
    for c, law in zip(tgt.classes, tgt.laws):
        h, mass = torus_grid_entropy_and_mass(law)
        assert abs(mass - 1) < 1e-9, c                          # periodic trapezoid rule on T²
        assert abs(tgt.class_entropy(c) - h) < 1e-9, c           # H(F) + H_vM(κ) vs the 2-D rule
    x, names = tgt.sample(20000, 11)
    lp = tgt.log_prob(x, names)
    for c in tgt.classes:
        sel = lp[names == c]
        se = sel.std(ddof=1) / math.sqrt(len(sel))
        assert abs(-sel.mean() - tgt.class_entropy(c)) < sigma_threshold(6e-5, checks=3) * se, c
    # class frequencies: χ² against the stated weights
    counts = np.array([(names == c).sum() for c in tgt.classes])
    assert scipy.stats.chisquare(counts, 20000 * tgt.weights).pvalue > p_value_threshold(1e-3)


def test_inpainting_conditional_is_the_law_of_angle1_given_angle0():
    tgt = ct.TorusInpainting()
    h, mass = torus_grid_entropy_and_mass(tgt.law)
    assert abs(mass - 1) < 1e-9 and abs(tgt.entropy() - h) < 1e-9
    # p(ψ | φ = a) = p(a, ψ) / p(a): the conditional's density times the marginal is the joint, 1e-12
    for a in cq.GIVEN_ANGLES:
        psi = np.linspace(-3, 3, 13)
        joint = tgt.log_prob(np.stack([np.full_like(psi, a), psi], 1))
        assert np.abs(tgt.conditional(a).log_prob(psi) + tgt.marginal_log_prob(a) - joint).max() < 1e-12
    # draws: the residual ψ - (ν + α sin φ) is vM(0, κ) whatever φ (KS against scipy.stats.vonmises)
    x = tgt.sample(5000, 3).numpy()
    res = ct.wrap(x[:, 1] - tgt.law.location(x[:, 0]))
    assert scipy.stats.kstest(res, scipy.stats.vonmises(tgt.law.kappa).cdf).pvalue > p_value_threshold(1e-3)


def test_mixed_categories_entropies_and_sampler():
    tgt = ct.MixedCategories()
    # joint entropy by the periodic trapezoid rule in the angle and a sum over the categories
    lp = np.stack([math.log(p) + law.log_prob(GRID) for p, law in zip(tgt.pi, tgt.laws)])
    dx = 2 * math.pi / N_GRID
    assert abs(float(-(np.exp(lp) * lp).sum() * dx) - tgt.entropy()) < 1e-9
    marg = np.log(np.exp(lp).sum(0))
    assert abs(float(-(np.exp(marg) * marg).sum() * dx) - tgt.angle_entropy()) < 1e-9
    x = tgt.sample(6000, 4)
    assert isinstance(x, tuple) and x[0].dtype == torch.float64 and x[1].dtype == torch.int64
    c, ang = x[1].numpy()[:, 0], x[0].numpy()[:, 0]
    assert scipy.stats.chisquare(np.bincount(c, minlength=3), 6000 * tgt.pi).pvalue > p_value_threshold(1e-3)
    a0 = ang[c == 0]  # category 0 is vM(-2, 8): KS against scipy's von Mises CDF
    assert scipy.stats.kstest(a0, scipy.stats.vonmises(8.0, loc=-2.0).cdf).pvalue > p_value_threshold(1e-3)


def test_mixture_conditional_is_bayes_rule():
    # a hand-made 3-component product-von-Mises mixture on T²; its conditional of ψ given φ = a must be
    # p(a, ψ) / ∫ p(a, ψ') dψ' (normalised by the periodic trapezoid rule on 400 points), tolerance 1e-9
    fit = {"params": {"m": np.array([[0.3, -1.0], [2.5, 1.2], [-2.0, 3.0]]),
                      "kappa": np.array([[2.0, 5.0], [0.7, 3.0], [4.0, 9.0]])},
           "logw": np.log(np.array([0.5, 0.3, 0.2]))}
    for a in (-2.6, 0.4, 3.0):
        joint = cq.vm_mixture_log_prob(fit, np.stack([np.full(N_GRID, a), GRID], 1))
        ref = joint - math.log(np.exp(joint).sum() * 2 * math.pi / N_GRID)
        assert np.abs(cq.mixture_conditional(fit, a).log_prob(GRID) - ref).max() < 1e-9
