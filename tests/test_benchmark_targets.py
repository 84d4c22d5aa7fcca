"""The fit-quality benchmark's targets (benchmarks/targets.py): entropies and samplers checked independently.

Each entropy is compared with an independent computation (mpmath quadrature at >= 30 digits,
scipy's own entropy, exact enumeration) and with a Monte Carlo estimate -mean log p over the
target's own samples (tolerance 4 standard errors: failure rate 6e-5 per check for a Gaussian
mean; seeds are fixed, so the outcome is deterministic). Samplers are checked with a KS or
χ² test on a 1-D or pair marginal against a CDF computed independently of the sampler
(p-value > 1e-3: failure rate 1e-3 per test under the null).
"""

import math
import os
import sys

import mpmath
import numpy as np
import scipy.integrate
import scipy.stats
import torch

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "benchmarks"))

import targets  # noqa: E402
from stat_thresholds import sigma_threshold, p_value_threshold


def mc_entropy(target, n, seed):
    lp = target.log_prob(target.sample(n, seed))
    return float(-lp.mean()), float(lp.std(ddof=1) / math.sqrt(n))


def check_monte_carlo(target, n=20000, seed=11):
    # Monte Carlo -mean log p over target samples; tolerance 4 standard errors
    h, se = mc_entropy(target, n, seed)
    assert abs(h - target.entropy()) < sigma_threshold(6e-5) * se, (h, se, target.entropy())


# ----- T² banana -------------------------------------------------------------------------------------
def test_torus_banana_entropy():
    tgt = targets.TorusBanana()
    mpmath.mp.dps = 30

    def h_vm(k):  # -∫ f log f over the circle, f = e^{κ cos θ} / (2π I0(κ)): mpmath quad at 30 digits
        k = mpmath.mpf(k)
        lz = mpmath.log(2 * mpmath.pi * mpmath.besseli(0, k))
        return mpmath.quad(lambda th: -mpmath.exp(k * mpmath.cos(th) - lz) * (k * mpmath.cos(th) - lz),
                           [-mpmath.pi, 0, mpmath.pi])

    ref = float(h_vm(tgt.k1) + h_vm(tgt.k2))
    assert abs(tgt.entropy() - ref) < 1e-10  # scipy.stats.vonmises entropy vs mpmath: float64 quadrature level
    check_monte_carlo(tgt)  # also checks that the shift a sin φ does not change the conditional entropy


def test_torus_banana_sampler():
    tgt = targets.TorusBanana()
    x = tgt.sample(5000, 3).numpy()
    # φ marginal is vM(mu, k1): KS against scipy's von Mises CDF
    assert scipy.stats.kstest(x[:, 0], scipy.stats.vonmises(tgt.k1, loc=tgt.mu).cdf).pvalue > p_value_threshold(1e-3)
    # the residual ψ - (nu + a sin φ), wrapped, is vM(0, k2) independently of φ
    res = np.remainder(x[:, 1] - tgt.nu - tgt.a * np.sin(x[:, 0]) + np.pi, 2 * np.pi) - np.pi
    assert scipy.stats.kstest(res, scipy.stats.vonmises(tgt.k2).cdf).pvalue > p_value_threshold(1e-3)


# ----- S² ring --------------------------------------------------------------------------------------
def test_sphere_ring_entropy():
    tgt = targets.SphereRing()
    mpmath.mp.dps = 30
    k, c = mpmath.mpf(tgt.kappa), mpmath.mpf(tgt.c)
    # mpmath at 30 digits: Z = 2π ∫ exp(-κ(u - c)²) du, H = -∫ 2π p log p du (area element 2π du)
    z = 2 * mpmath.pi * mpmath.quad(lambda u: mpmath.exp(-k * (u - c) ** 2), [-1, c, 1])
    h = mpmath.quad(lambda u: -2 * mpmath.pi * mpmath.exp(-k * (u - c) ** 2) / z
                    * (-k * (u - c) ** 2 - mpmath.log(z)), [-1, c, 1])
    assert abs(tgt.entropy() - float(h)) < 1e-10  # scipy quad (epsrel 1e-12) vs mpmath
    # second reference: u is a truncated normal, and x has density p_u(u) / (2π) (uniform azimuth)
    lo, hi = (-1 - tgt.c) * math.sqrt(2 * tgt.kappa), (1 - tgt.c) * math.sqrt(2 * tgt.kappa)
    ref = scipy.stats.truncnorm(lo, hi, loc=tgt.c, scale=1 / math.sqrt(2 * tgt.kappa)).entropy() + math.log(2 * math.pi)
    assert abs(tgt.entropy() - ref) < 1e-9  # scipy.stats.truncnorm entropy, float64 level
    check_monte_carlo(tgt)


def test_sphere_ring_sampler():
    tgt = targets.SphereRing()
    x = tgt.sample(5000, 4).numpy()
    u = x @ tgt.mu
    s = math.sqrt(tgt.kappa)
    z_u = math.erf(s * (1 - tgt.c)) + math.erf(s * (1 + tgt.c))
    cdf = lambda v: (np.vectorize(math.erf)(s * (np.asarray(v) - tgt.c)) + math.erf(s * (1 + tgt.c))) / z_u  # noqa: E731
    assert scipy.stats.kstest(u, cdf).pvalue > p_value_threshold(1e-3)  # u = μ·x against the erf CDF of the stated density
    # azimuth about μ uniform: KS against U(-π, π) in a frame built here
    e1 = np.cross(tgt.mu, [0.0, 0.0, 1.0])
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(tgt.mu, e1)
    az = np.arctan2(x @ e2, x @ e1)
    assert scipy.stats.kstest(az, scipy.stats.uniform(-np.pi, 2 * np.pi).cdf).pvalue > p_value_threshold(1e-3)


# ----- SO(3) bimodal ---------------------------------------------------------------------------------
def igso3_series_mp(w, coef):
    """IGSO(3) density (1/8π²) Σ_l (2l+1) e^{-l(l+1)t/2} sin((l+½)w)/sin(w/2) — the character series of
    Brownian motion with generator (1/2)Δ on SO(3) (Casimir eigenvalues l(l+1)); mpmath at 60 digits.
    ``coef[l]`` = (2l+1) e^{-l(l+1)t/2}; sin((l+½)w) = Im(e^{iw/2} e^{ilw}) by repeated multiplication."""
    with mpmath.workdps(60):
        z, e, s = mpmath.expjpi(w / mpmath.pi), mpmath.expjpi(w / (2 * mpmath.pi)), mpmath.mpf(0)
        for c in coef:
            s += c * e.imag
            e *= z
        return s / mpmath.sin(w / 2) / (8 * mpmath.pi**2)


def igso3_angle_cdf(w, t, lmax=90):
    """CDF of the angle: ∫_0^w f 8π(1 - cos s) ds = (1/π) Σ_l (2l+1) e^{-l(l+1)t/2} [sin(l w)/l - sin((l+1)w)/(l+1)]
    (term l = 0: w - sin w), from 2 sin²(s/2) sin((l+½)s)/sin(s/2) = cos(l s) - cos((l+1)s)."""
    w = np.asarray(w, dtype=np.float64)
    out = w - np.sin(w)
    for l in range(1, lmax + 1):
        out = out + (2 * l + 1) * math.exp(-l * (l + 1) * t / 2) * (np.sin(l * w) / l - np.sin((l + 1) * w) / (l + 1))
    return out / math.pi


def test_so3_bimodal_entropy():
    tgt = targets.SO3Bimodal()
    # series at 60 digits (near w = π the density is ~1e-43 while the terms are O(1); truncation at
    # l = 70 leaves e^{-70·71·t/2} ≈ 1e-54), quadrature (tanh-sinh) at 30 digits
    mpmath.mp.dps = 30
    with mpmath.workdps(60):
        coef = [(2 * l + 1) * mpmath.exp(-l * (l + 1) * mpmath.mpf(tgt.t) / 2) for l in range(71)]

    def integrand(w):
        with mpmath.workdps(60):
            f = igso3_series_mp(w, coef)
            return -f * mpmath.log(f) * 8 * mpmath.pi * (1 - mpmath.cos(w))

    h = mpmath.quad(integrand, [0, 0.2, 0.5, 1, 2, mpmath.pi])
    ref = float(h) + math.log(2)
    assert abs(tgt.entropy() - ref) < 1e-9  # heatwalk kernel + scipy quad vs mpmath character series
    assert tgt.overlap_bound() < 1e-8  # δ = H(IGSO3) + log 2 - H(mixture) lies in [0, bound]
    check_monte_carlo(tgt)


def test_so3_bimodal_sampler():
    tgt = targets.SO3Bimodal()
    x = tgt.sample(4000, 5)
    d = torch.stack([tgt.space.dist(c.expand_as(x), x) for c in tgt.centres])  # (2, n)
    near0 = d[0] < d[1]
    # equal weights: binomial count within 4 standard deviations
    assert abs(float(near0.double().mean()) - 0.5) < 4 * 0.5 / math.sqrt(4000)
    # angle to the nearer centre follows the IGSO(3) angle law (closed-form series CDF above)
    w = d.min(0).values.numpy()
    assert scipy.stats.kstest(w, lambda v: igso3_angle_cdf(v, tgt.t)).pvalue > p_value_threshold(1e-3)


# ----- simplex ----------------------------------------------------------------------------------------
def test_simplex_quadrature_and_entropy():
    tgt = targets.SimplexDirichletMixture()
    # the triangle rule on one Dirichlet against scipy.stats.dirichlet.entropy (closed form), tolerance 1e-8
    for a in tgt.alphas:
        single = targets.SimplexDirichletMixture(weights=(1.0,), alphas=(tuple(a),))
        assert abs(single.entropy() - scipy.stats.dirichlet(a).entropy()) < 1e-8
    # the mixture against scipy's adaptive dblquad (a different rule), tolerance 1e-7
    comps = [(w, a, math.lgamma(a.sum()) - sum(math.lgamma(ai) for ai in a)) for w, a in zip(tgt.weights, tgt.alphas)]

    def f(x2, x1):  # scalar Dirichlet-mixture density in plain math (independent of targets.log_prob)
        x3 = 1 - x1 - x2
        if x1 <= 0 or x2 <= 0 or x3 <= 0:
            return 0.0
        p = sum(w * math.exp(c + (a[0] - 1) * math.log(x1) + (a[1] - 1) * math.log(x2) + (a[2] - 1) * math.log(x3))
                for w, a, c in comps)
        return -p * math.log(p) if p > 0 else 0.0
    ref, _ = scipy.integrate.dblquad(f, 0, 1, 0, lambda x1: 1 - x1, epsabs=1e-10, epsrel=1e-10)
    assert abs(tgt.entropy() - ref) < 1e-7
    check_monte_carlo(tgt)


def test_simplex_sampler_and_density():
    tgt = targets.SimplexDirichletMixture()
    x = tgt.sample(5000, 6).numpy()
    # log-density against scipy.stats.dirichlet.logpdf (independent), tolerance 1e-10
    ref = np.log(sum(w * scipy.stats.dirichlet(a).pdf(x[:50].T) for w, a in zip(tgt.weights, tgt.alphas)))
    assert np.abs(tgt.log_prob(x[:50]) - ref).max() < 1e-10
    # x1 is a mixture of Beta(a1, a2 + a3) laws: KS against scipy.stats.beta
    cdf = lambda v: sum(w * scipy.stats.beta(a[0], a[1:].sum()).cdf(v) for w, a in zip(tgt.weights, tgt.alphas))  # noqa: E731
    assert scipy.stats.kstest(x[:, 0], cdf).pvalue > p_value_threshold(1e-3)


# ----- Markov source ----------------------------------------------------------------------------------
def test_markov_entropy_by_enumeration():
    # exact enumeration of all 4^7 sequences of length 7 (same class, L = 7): tolerance 1e-10
    src = targets.MarkovSource(L=7)
    seqs = np.array(np.meshgrid(*[np.arange(4)] * 7, indexing="ij")).reshape(7, -1).T
    lp = src.log_prob(seqs)
    assert abs(np.exp(lp).sum() - 1) < 1e-12
    assert abs(float(-(np.exp(lp) * lp).sum()) - src.entropy()) < 1e-10
    check_monte_carlo(targets.MarkovSource())  # L = 12, Monte Carlo


def test_markov_sampler():
    src = targets.MarkovSource()
    x = src.sample(20000, 7).numpy()
    # stationarity and transitions: χ² on the pair (x_5, x_6) against π_a T_ab
    obs = np.zeros((4, 4))
    np.add.at(obs, (x[:, 5], x[:, 6]), 1)
    exp = 20000 * src.pi[:, None] * src.T
    assert scipy.stats.chisquare(obs.ravel(), exp.ravel()).pvalue > p_value_threshold(1e-3)
    # the first position is stationary too
    assert scipy.stats.chisquare(np.bincount(x[:, 0], minlength=4), 20000 * src.pi).pvalue > p_value_threshold(1e-3)
