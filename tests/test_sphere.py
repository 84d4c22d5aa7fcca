"""Sphere S^d: heat kernel against mpmath, sampler against quadrature and a random walk,
geometry against geomstats, validation errors.

Tolerance convention for the kernel: errors are relative to max(1, |reference|).
"""

import math

import mpmath as mp
import numpy as np
import pytest
import torch
from scipy import stats
from scipy.integrate import quad, quad_vec

from hypothesis import given, settings
from hypothesis import strategies as st

from heatwalk import InputError
from heatwalk.kernels import sphere_s2
from heatwalk.kernels.sphere_expansion import expansion_log_prob_and_score
from heatwalk.kernels.sphere_heat import (EXPANSION_TOLERANCE, log_sphere_area, sample_sphere_radius,
                                          sphere_heat_log_prob_and_score)
from heatwalk.kernels.sphere_series import SERIES_MAX_TERMS, series_terms
from heatwalk.spaces import Sphere, Torus, from_config
from stat_thresholds import p_value_threshold

F64 = torch.float64
TIMES = [1e-5, 1e-4, 1e-3, 1e-2, 0.1, 0.44, 0.46, 2.0, 50.0]  # log-spaced, plus both sides of the switch
RADII = [0.0, 1e-6, 0.05, 0.7, 1.6, 2.6, 3.1, math.pi - 1e-6, math.pi - 1e-9, math.pi]


def kernel(r, t, d):
    lp, sc = sphere_heat_log_prob_and_score(torch.tensor(r, dtype=F64), torch.tensor(t, dtype=F64), d)
    return float(lp), float(sc)


# ---- mpmath references (50 digits or more) ------------------------------------------------------
def mp_gegenbauer_series(r, t, d, extra_digits=0):
    """Eigen-series Σ_l e^{-l(l+d-1)t/2} (2l+d-1)/(d-1) C_l^{(d-1)/2}(cos r) / |S^d| and its r-derivative."""
    with mp.workdps(50 + extra_digits):
        r, t = mp.mpf(r), mp.mpf(t)
        a = mp.mpf(d - 1) / 2
        n = int(mp.sqrt(2 * (50 + extra_digits) * 2.31 / t + 4 * a * a)) + 20
        x = mp.cos(r)
        c0, c1 = mp.mpf(1), 2 * a * x  # C_l^a
        g0, g1 = mp.mpf(0), mp.mpf(1)  # C_{l-1}^{a+1}
        s, ds = mp.mpf(1), mp.mpf(0)
        for l in range(1, n + 1):
            w = (l + a) / a * mp.exp(-l * (l + 2 * a) * t / 2)
            s += w * c1
            ds -= w * 2 * a * mp.sin(r) * g1
            c0, c1 = c1, (2 * x * (l + a) * c1 - (l + 2 * a - 1) * c0) / (l + 1)
            g0, g1 = g1, (2 * x * (l + a) * g1 - (l + 2 * a) * g0) / l
        area = 2 * mp.pi ** ((d + 1) / mp.mpf(2)) / mp.gamma((d + 1) / mp.mpf(2))
        return mp.log(s / area), ds / s


def mp_s3_images(r, t):
    """S^3 closed form (images of the S^1 kernel under -(2π sin r)^{-1} d/dr, times e^{t/2})."""
    with mp.workdps(50):
        t = mp.mpf(t)

        def logp(r):
            k_max = int(3 * mp.sqrt(t)) + 4
            s = sum((r + 2 * mp.pi * k) * mp.exp(-(r + 2 * mp.pi * k) ** 2 / (2 * t)) for k in range(-k_max, k_max + 1))
            return t / 2 - mp.mpf(1.5) * mp.log(2 * mp.pi * t) + mp.log(s / mp.sin(r))

        r = mp.mpf(r) if r > 0 else mp.mpf(10) ** -30
        return logp(r), mp.diff(logp, r)


def mp_s2_mehler(theta, t, dps=30):
    """S^2 via the Mehler–Dirichlet integral (DLMF 14.12) summed with the theta-function images:
    p = e^{t/8} / (2 π^{3/2} t^{3/2}) ∫_θ^π Σ_k (-1)^k (φ-2πk) e^{-(φ-2πk)²/2t} / sqrt(cos θ - cos φ) dφ,
    integrated by mpmath tanh-sinh in v = sqrt(φ - θ)."""
    with mp.workdps(dps):
        th, t = mp.mpf(theta), mp.mpf(t)

        def g(v):
            phi = th + v * v
            tot = sum((-1) ** k * (phi - 2 * mp.pi * k) * mp.exp(-((phi - 2 * mp.pi * k) ** 2 - th * th) / (2 * t))
                      for k in range(-3, 4))
            return 2 * v * tot / mp.sqrt(2 * mp.sin((2 * mp.pi - phi - th) / 2) * mp.sin(v * v / 2))

        v_max = mp.sqrt(mp.pi - th)
        scale = mp.sqrt(t / max(th, mp.sqrt(t)))
        pts = [mp.mpf(0)] + [c * scale for c in (1, 3, 10, 30, 100) if c * scale < v_max] + [v_max]
        return mp.log(mp.exp(t / 8) / (2 * mp.pi ** 1.5 * t ** 1.5) * mp.quad(g, pts)) - th * th / (2 * t)


def s2_reference(r, t):
    digits_lost = r * r / (2 * t) / 2.3
    if digits_lost < 40:  # the eigen-series is summable at 50 + digits_lost digits
        return mp_gegenbauer_series(r, t, 2, extra_digits=int(digits_lost) + 5)
    # derivative: central difference; step below π - r so both points lie in [0, π], and below 1e-7 t
    # (the third derivative of log p grows like t^-3 next to the antipode: truncation error h² f'''/6).
    # Next to π the score is ~(π - r)/t², so the difference needs ~50 digits there, 30 elsewhere.
    h = min(1e-10, 1e-7 * t)
    dps = 50 if (math.pi - r < 1e-5 or h < 1e-10) else 30
    lp = mp_s2_mehler(r, t, dps)
    with mp.workdps(dps):
        h = min(mp.mpf(h), (mp.pi - mp.mpf(r)) / 4)
        d = (mp_s2_mehler(mp.mpf(r) + h, t, dps) - mp_s2_mehler(mp.mpf(r) - h, t, dps)) / (2 * h)
    return lp, d


def _worst(d, reference):
    worst_lp, worst_sc, where_lp, where_sc = 0.0, 0.0, None, None
    for t in TIMES:
        for r in RADII:
            lp, sc = kernel(r, t, d)
            rl, rs = (float(v) for v in reference(r, t))
            e1 = abs(lp - rl) / max(1.0, abs(rl))
            e2 = abs(sc - rs) / max(1.0, abs(rs))
            if e1 > worst_lp:
                worst_lp, where_lp = e1, (t, r)
            if e2 > worst_sc:
                worst_sc, where_sc = e2, (t, r)
    return worst_lp, where_lp, worst_sc, where_sc


@pytest.mark.parametrize("d,reference", [(3, mp_s3_images), (2, s2_reference)], ids=["S3", "S2"])
def test_kernel_against_mpmath(d, reference):
    # source: mpmath at >= 30-50 digits (S^3: closed image sum; S^2: eigen-series where it is summable,
    # Mehler–Dirichlet integral elsewhere). Tolerance: log p 1e-9, d/dr log p 1e-7, relative to max(1, |.|).
    wl, at_l, ws, at_s = _worst(d, reference)
    assert wl < 1e-9, f"S^{d}: worst log-density error {wl:.3g} at (t, r) = {at_l}"
    assert ws < 1e-7, f"S^{d}: worst radial-score error {ws:.3g} at (t, r) = {at_s}"


def test_mehler_reference_agrees_with_series():
    # the two mpmath references agree where both apply (cross-check of the reference itself), to 1e-20
    for r, t in [(2.5, 0.3), (3.1, 0.2), (1.0, 0.01)]:
        a = mp_gegenbauer_series(r, t, 2, extra_digits=20)[0]
        b = mp_s2_mehler(r, t, dps=40)
        assert abs(a - b) < 1e-20, (r, t, a, b)


@pytest.mark.parametrize("d", [4, 5])
def test_higher_d_series_against_mpmath(d):
    # source: mpmath Gegenbauer series at 50 digits; where the series is accurate: tolerance 1e-9 / 1e-7
    for t in (1e-3, 0.1, 1.0, 10.0):
        for r in (0.0, 0.5 * math.sqrt(t), 2 * math.sqrt(t), 1.0, 3.0):
            if r * r / (2 * t) > 10 or r > math.pi:
                continue
            lp, sc = kernel(r, t, d)
            rl, rs = (float(v) for v in mp_gegenbauer_series(r, t, d))
            assert abs(lp - rl) < 1e-9 * max(1, abs(rl)), (d, t, r, lp, rl)
            assert abs(sc - rs) < 1e-7 * max(1, abs(rs)), (d, t, r, sc, rs)


def test_higher_d_refuses_inaccurate_regime():
    # r = 3 at t = 1e-3: beyond the expansion's radius, and the series (430 terms) cancels to noise there
    with pytest.raises(InputError, match="cannot reach 1e-10 relative accuracy"):
        sphere_heat_log_prob_and_score(torch.tensor([0.1, 3.0], dtype=F64), torch.tensor(1e-3, dtype=F64), 4)


def mp_s5_from_s3(r, t):
    """S^5 from the S^3 image sum by the dimension-raising identity p_{d+2} = -e^{dt/2}/(2π sin r) dp_d/dr
    (from d/dx C_n^λ = 2λ C_{n-1}^{λ+1}, DLMF 18.9.19), in closed form; d/dr log p by mpmath diff."""
    with mp.workdps(80):
        t = mp.mpf(t)

        def logp(r):
            f = fp = mp.mpf(0)
            for k in range(-(int(3 * mp.sqrt(t)) + 4), int(3 * mp.sqrt(t)) + 5):
                a = r + 2 * mp.pi * k
                e = mp.exp(-a * a / (2 * t))
                f, fp = f + a * e, fp + (1 - a * a / t) * e  # S^3 numerator and its r-derivative
            c3 = mp.exp(t / 2) * (2 * mp.pi * t) ** mp.mpf(-1.5)
            return mp.log(-c3 * mp.exp(1.5 * t) / (2 * mp.pi) * (fp * mp.sin(r) - f * mp.cos(r)) / mp.sin(r) ** 3)

        return logp(mp.mpf(r)), mp.diff(logp, mp.mpf(r))


def mp_s4_from_s2(r, t, dps=50):
    """S^4 from the S^2 Mehler–Dirichlet integral by the same identity, p_4 = -e^t/(2π sin r) dp_2/dr:
    log p_4 = t - log(2π sin r) + log p_2 + log(-g1), d/dr log p_4 = -cot r + g1 + g2/g1, with g1, g2 the
    first two r-derivatives of log p_2 by central differences (step 1e-9 r, error ~1e-18 relative)."""
    with mp.workdps(dps):
        r, t = mp.mpf(r), mp.mpf(t)
        h = mp.mpf(10) ** -9 * r
        fm, f0, fp = (mp_s2_mehler(x, t, dps) for x in (r - h, r, r + h))
        g1, g2 = (fp - fm) / (2 * h), (fp - 2 * f0 + fm) / h ** 2
        return t - mp.log(2 * mp.pi * mp.sin(r)) + f0 + mp.log(-g1), -mp.cot(r) + g1 + g2 / g1


def test_dimension_raising_references_agree_with_series():
    # cross-check of the two references against the 50-digit Gegenbauer series where all apply, to 1e-18
    for r, t in [(0.3, 0.05), (1.0, 0.1)]:
        for d, ref in ((5, mp_s5_from_s3), (4, mp_s4_from_s2)):
            a = mp_gegenbauer_series(r, t, d, extra_digits=int(r * r / (2 * t) / 2.3) + 5)
            b = ref(r, t)
            assert abs(a[0] - b[0]) < 1e-18 and abs(a[1] - b[1]) < 1e-18, (d, r, t, a, b)


@pytest.mark.parametrize("d", [4, 5])
def test_higher_d_small_time_against_mpmath(d):
    # source: 50-digit Gegenbauer series where it is summable (r²/2t < 60 digits), else the dimension-raising
    # references above (S^5 closed form from S^3; S^4 from the S^2 Mehler–Dirichlet integral).
    # Tolerance: log p 1e-12, d/dr log p 1e-11, relative to max(1, |.|) (measured worst: 2e-14, 5e-14).
    cases = [(1e-6, r) for r in (1e-4, 2e-3, 1.0, 2.5)] + [(1e-4, r) for r in (0.0, 0.003, 0.02, 0.5, 2.0, 2.8)]
    cases += [(1e-2, r) for r in (0.0, 0.05, 0.2, 1.0, 2.5)] + [(0.05, r) for r in (0.3, 1.0, 2.0)]
    if d == 4:  # the S^4 reference costs ~2 s a point: fewer far points
        cases = [c for c in cases if c[1] * c[1] / (2 * c[0]) < 138 or c in ((1e-6, 2.5), (1e-4, 2.0))]
    for t, r in cases:
        lp, sc = kernel(r, t, d)
        if r * r / (2 * t) < 138:
            rl, rs = (float(v) for v in mp_gegenbauer_series(r, t, d, extra_digits=int(r * r / (2 * t) / 2.3) + 5))
        else:
            rl, rs = (float(v) for v in (mp_s5_from_s3(r, t) if d == 5 else mp_s4_from_s2(r, t)))
        assert abs(lp - rl) <= 1e-12 * max(1.0, abs(rl)), (d, t, r, lp, rl)
        assert abs(sc - rs) <= 1e-11 * max(1.0, abs(rs)), (d, t, r, sc, rs)


@pytest.mark.parametrize("d", [4, 5, 6])
def test_higher_d_tiny_time_is_bounded(d):
    # At t = 1e-12 the eigen-series would need ~1e7 terms: its term count stops at the cap, and the small-time
    # expansion is the method used (its error estimate meets the tolerance). Values against the closed-form
    # first transport coefficient v_1(r) = α²/2 - α(α-1)(1/r - cot r)/(2r) of the same expansion (solved by
    # hand from the transport equation in heatwalk.kernels.sphere_expansion); t² terms are below 1e-23.
    t = 1e-12
    assert series_terms(t, d) == SERIES_MAX_TERMS + 1
    a = 0.5 * (d - 1)
    r = torch.tensor([0.0, 1e-6, 3e-6, 1e-3, 1.0, 2.5], dtype=F64)
    err = expansion_log_prob_and_score(r, torch.full_like(r, t), d)[2]
    assert bool((err <= EXPANSION_TOLERANCE).all()), err
    lp, sc = sphere_heat_log_prob_and_score(r, torch.full_like(r, t), d)
    for i, ri in enumerate(r.tolist()):
        v1 = 0.5 * a * a - a * (a - 1) / 6 if ri == 0 else 0.5 * a * a - 0.5 * a * (a - 1) * (1 / ri - 1 / math.tan(ri)) / ri
        ref = -0.5 * d * math.log(2 * math.pi * t) - ri * ri / (2 * t) + (a * math.log(ri / math.sin(ri)) if ri else 0.0)
        ref += math.log1p(v1 * t)
        assert abs(float(lp[i]) - ref) <= 1e-15 * max(1.0, abs(ref)), (d, ri, float(lp[i]), ref)
    with pytest.raises(InputError, match=rf"S\^{d}: at t = 1e-12, r = 3 no representation reaches the tolerance"):
        sphere_heat_log_prob_and_score(torch.tensor([3.0], dtype=F64), torch.tensor([t], dtype=F64), d)


@given(st.sampled_from([1, 2, 3, 4, 6]), st.floats(min_value=math.log(1e-12), max_value=math.log(1e6)),
       st.floats(min_value=0.0, max_value=math.pi))
@settings(max_examples=400, deadline=None)
def test_kernel_finite_or_input_error(d, log_t, r):
    # property: for t log-uniform in [1e-12, 1e6] and r in [0, π] the kernel returns finite log p and score,
    # or (d >= 4 only) raises InputError naming d and t
    t = math.exp(log_t)
    try:
        lp, sc = kernel(r, t, d)
    except InputError as e:
        assert d >= 4 and f"S^{d}: at t = " in str(e), str(e)
        return
    assert math.isfinite(lp) and math.isfinite(sc), (d, t, r, lp, sc)


S2_BOUNDARY_W = (1.0, 1.9, 2.1, 3.9, 4.1, 7.9, 8.1, 11.9, 12.1, 19.9, 20.1, 31.9, 32.1, 37.9, 38.2, 45.0, 63.9, 64.1,
                 180.9, 181.1, 723.9, 724.2, 8191.0, 8193.0, 1e5)


def test_s2_switch_points_against_mpmath():
    # source: s2_reference (50-digit Legendre series, or the Mehler–Dirichlet integral by mpmath quad).
    # Points on both sides of every change of representation or node count (W = 2π(π - θ)/t, the Legendre
    # region t >= 0.6 or t >= 0.15 with θ² <= 10 t). Tolerance: log p 1e-13 and d/dr log p 1e-12 relative to
    # max(1, |.|), plus for the score the rounding floor 8 eps π / t of -θ/t + (integral term) next to the
    # antipode (measured worst: 3e-15 and 4e-14 away from it).
    pts = [(math.pi - w * t / (2 * math.pi), t) for t in (1e-5, 1e-3, 0.05, 0.3, 0.59) for w in S2_BOUNDARY_W
           if w * t / (2 * math.pi) <= math.pi]
    pts += [(math.sqrt(10 * t) * f, t) for t in (0.151, 0.4) for f in (1 - 1e-9, 1 + 1e-9)]
    pts += [(th, t) for t in (0.599, 0.601) for th in (0.0, 2.5, math.pi)]
    codes = set()
    for th, t in pts:
        codes.add(int(sphere_s2.plan(torch.tensor([th], dtype=F64), torch.tensor([t], dtype=F64))))
        lp, sc = kernel(th, t, 2)
        rl, rs = (float(v) for v in s2_reference(th, t))
        assert abs(lp - rl) <= 1e-13 * max(1.0, abs(rl)), (th, t, lp, rl)
        assert abs(sc - rs) <= 1e-12 * max(1.0, abs(rs)) + 8 * 2.2e-16 * math.pi / t, (th, t, sc, rs)
    rules = {c for c in codes if c >= sphere_s2.LAGUERRE_CODE}
    assert len(rules) == 12 and min(codes) < sphere_s2.LAGUERRE_CODE  # every quadrature rule and the series ran


@pytest.mark.parametrize("d", [2, 3, 4, 5])
def test_short_time_asymptotics(d):
    # source: Minakshisundaram–Pleijel leading term with the van Vleck determinant,
    # p ≈ (2πt)^{-d/2} (r / sin r)^{(d-1)/2} e^{-r²/2t} (1 + O(t)), the O(t) constant at r = 0 being
    # α²/2 - α(α-1)/6 < d (α = (d-1)/2; for S^2 the scalar curvature / 6 in time t, R = 2): check |error| <= d t
    for t in (1e-5, 1e-4, 1e-3):
        for r in (0.0, 0.3, 1.0, 2.0):
            lp, _ = kernel(r, t, d)
            lead = -0.5 * d * math.log(2 * math.pi * t) - r * r / (2 * t) + 0.5 * (d - 1) * math.log(
                r / math.sin(r) if r > 0 else 1.0)
            assert abs(lp - lead) <= d * t, (d, t, r, lp - lead)


@pytest.mark.parametrize("d", [2, 3])
def test_normalisation_quad(d):
    # source: scipy.integrate.quad of p_t(r) |S^{d-1}| sin^{d-1} r over [0, π] in s = r/sqrt(t); tolerance 1e-9
    for t in (1e-5, 1e-3, 0.1, 0.44, 0.46, 2.0):
        def f(s):
            r = min(s * math.sqrt(t), math.pi)
            lp, _ = kernel(r, t, d)
            return math.sqrt(t) * math.exp(lp + log_sphere_area(d - 1)) * math.sin(r) ** (d - 1)
        s_max = math.pi / math.sqrt(t)
        pts = [x for x in (1.0, 2.0, 4.0, 8.0, 16.0) if x < s_max]
        total = quad(f, 0, s_max, points=pts, limit=400, epsabs=1e-13, epsrel=1e-13)[0]
        assert abs(total - 1) < 1e-9, (d, t, total - 1)


@pytest.mark.parametrize("d", [2, 3])
def test_radial_score_finite_differences(d):
    # central differences of log p in r, step 1e-6 sqrt(t): error O(h²) + eps/h; tolerance 1e-6 relative
    for t in (1e-4, 0.05, 0.44, 0.46, 3.0):
        for r in (0.3 * math.sqrt(t), 2 * math.sqrt(t), 1.5, 3.0):
            h = 1e-6 * math.sqrt(t)
            fd = (kernel(r + h, t, d)[0] - kernel(r - h, t, d)[0]) / (2 * h)
            sc = kernel(r, t, d)[1]
            assert abs(fd - sc) < 1e-6 * max(1.0, abs(sc)) + 1e-9 / h * 1e-6, (d, t, r, fd, sc)


def _radial_cdf(t, d):
    """CDF of r from scipy.integrate.quad_vec (adaptive, vector-valued) over 400 pieces of [0, π]."""
    edges = np.linspace(0, math.pi, 401)
    a, w = edges[:-1], np.diff(edges)

    def pieces(s):
        r = torch.tensor(a + s * w, dtype=F64)
        lp = sphere_heat_log_prob_and_score(r, torch.full_like(r, t), d)[0]
        return w * np.exp(lp.numpy() + log_sphere_area(d - 1)) * np.sin(r.numpy()) ** (d - 1)

    vals = quad_vec(pieces, 0.0, 1.0, epsabs=1e-14, epsrel=1e-12)[0]
    cdf = np.concatenate([[0.0], np.cumsum(vals)])
    assert abs(cdf[-1] - 1) < 1e-9
    return lambda x: np.interp(x, edges, cdf)  # linear interpolation error below 1e-5 at this grid


@pytest.mark.parametrize("d", [2, 3])
@pytest.mark.parametrize("t", [0.02, 0.6])
def test_sampler_kolmogorov_smirnov(d, t):
    # source: scipy.stats.kstest against the CDF from scipy quad_vec; fixed seed, 20k draws per path;
    # failure rate of a correct sampler: 1e-3 per test (p-value threshold).
    cdf = _radial_cdf(t, d)
    g = torch.Generator().manual_seed(123)
    exact_path = sample_sphere_radius(torch.full((20000,), t, dtype=F64), d, g)
    # distinct times (> 64) go through the table interpolated in log t
    table_path = sample_sphere_radius(t * (1 + 1e-12 * torch.rand(20000, dtype=F64, generator=g)), d, g)
    for r in (exact_path, table_path):
        assert stats.kstest(r.numpy(), cdf).pvalue > p_value_threshold(1e-3)


@pytest.mark.parametrize("d", [2, 3])
def test_sampler_vs_geodesic_random_walk(d):
    # independent sampler: geodesic random walk with 400 Gaussian tangent steps of variance t/400 each.
    # E[r²] agrees within 5 standard errors plus the walk's O(step) bias (relative ~ d·t/400, below 1e-3).
    space = Sphere(d)
    t, n, steps = 0.04, 20000, 400
    g = torch.Generator().manual_seed(7)
    x0 = space.random_uniform(1, g).expand(n, d + 1).clone()
    x = x0.clone()
    for _ in range(steps):
        x = space.exp(x, math.sqrt(t / steps) * space.random_tangent(x, g))
    r2_walk = space.dist(x, x0) ** 2
    r2_exact = space.dist(space.sample_forward(x0, t, g), x0) ** 2
    se = math.sqrt(float(r2_walk.var()) / n + float(r2_exact.var()) / n)
    diff = abs(float(r2_walk.mean()) - float(r2_exact.mean()))
    assert diff < 5 * se + 1e-3 * float(r2_exact.mean()), (diff, se)


def test_exp_log_against_geomstats():
    # source: geomstats 2.8 Hypersphere(dim=2) metric exp/log, numpy backend; tolerance 1e-10
    import geomstats.backend  # noqa: F401
    from geomstats.geometry.hypersphere import Hypersphere

    gs_sphere = Hypersphere(dim=2)
    space = Sphere(2)
    g = torch.Generator().manual_seed(3)
    x = space.random_uniform(50, g)
    y = space.random_uniform(50, g)
    v = 2.0 * space.random_tangent(x, g)
    np.testing.assert_allclose(space.exp(x, v).numpy(), gs_sphere.metric.exp(v.numpy(), x.numpy()), atol=1e-10)
    np.testing.assert_allclose(space.log(x, y).numpy(), gs_sphere.metric.log(y.numpy(), x.numpy()), atol=1e-10)


def test_log_at_antipode_and_score_edges():
    space = Sphere(2)
    x = space.validate([[0.0, 0.0, 1.0], [1.0, 0.0, 0.0]])
    v = space.log(x, -x)
    torch.testing.assert_close(space.norm(x, v), torch.full((2,), math.pi, dtype=F64), atol=1e-14, rtol=0)
    torch.testing.assert_close(space.to_tangent(x, v), v, atol=1e-14, rtol=0)
    torch.testing.assert_close(space.exp(x, v), -x, atol=1e-12, rtol=0)
    for t in (1e-3, 0.3, 3.0):
        s = space.score(torch.cat([x, -x]), torch.cat([x, x]), t)
        assert torch.isfinite(s).all() and float(s.abs().max()) < 1e-6


def test_sphere1_matches_torus1():
    th = torch.linspace(-3.1, 3.1, 17, dtype=F64)[:, None]
    th0 = torch.full_like(th, 0.4)
    pts = lambda a: torch.cat([torch.cos(a), torch.sin(a)], -1)  # noqa: E731
    for t in (1e-3, 0.5, 5.0):
        # same kernel; the two only differ in how the angle difference is rounded (few ulps)
        torch.testing.assert_close(Sphere(1).log_kernel(pts(th), pts(th0), t), Torus(1).log_kernel(th, th0, t),
                                   atol=1e-12, rtol=1e-13)


def test_config_volume_and_rows():
    s2 = Sphere(2)
    assert from_config(s2.config()) == s2 and s2.config() == {"kind": "sphere", "d": 2}
    assert abs(s2.log_volume - math.log(4 * math.pi)) < 1e-15  # area of S^2 = 4π
    assert abs(Sphere(3).log_volume - math.log(2 * math.pi ** 2)) < 1e-15
    # rows are (longitude, latitude) in degrees, in that order
    rows = torch.tensor([[0.0, 0.0], [10.0, 90.0], [270.0, -45.0], [-120.0, 30.0]], dtype=F64)
    x = s2.from_rows(rows, lonlat=True)
    torch.testing.assert_close(x[1], torch.tensor([0.0, 0.0, 1.0], dtype=F64), atol=1e-15, rtol=0)
    # (lon, lat) = (-120, 30): x = cos 30° cos(-120°), y = cos 30° sin(-120°), z = sin 30° (spherical coordinates)
    c = math.cos(math.radians(30))
    torch.testing.assert_close(x[3], torch.tensor([-0.5 * c, -math.sqrt(3) / 2 * c, 0.5], dtype=F64), atol=1e-15,
                               rtol=0)
    back = s2.to_rows(x, lonlat=True)
    torch.testing.assert_close(back[[0, 3]], rows[[0, 3]], atol=1e-12, rtol=0)
    torch.testing.assert_close(back[2], torch.tensor([-90.0, -45.0], dtype=F64), atol=1e-12, rtol=0)
    assert s2.column_names(lonlat=True) == ["longitude_deg", "latitude_deg"]


def test_validation_errors():
    s2 = Sphere(2)
    with pytest.raises(InputError, match="row 1 contains NaN"):
        s2.validate([[1.0, 0, 0], [float("nan"), 0, 0]])
    with pytest.raises(InputError, match=r"expected shape \(n, 3\)"):
        s2.validate([[1.0, 0]])
    with pytest.raises(InputError, match="row 0: is the zero vector"):
        s2.validate([[0.0, 0, 0]])
    with pytest.raises(InputError, match="row 1: has norm 1.1"):
        s2.validate([[1.0, 0, 0], [1.1, 0, 0]])
    ok = s2.validate([[1.0 + 5e-7, 0, 0]])  # within 1e-6: renormalised
    assert float(ok.norm()) == 1.0
    with pytest.raises(InputError, match=r"row 1, column 1: latitude 91 degrees"):
        s2.from_rows([[0.0, 0.0], [0.0, 91.0]], lonlat=True)
    with pytest.raises(InputError, match=r"row 0, column 0: longitude 400 degrees"):
        s2.from_rows([[400.0, 0.0]], lonlat=True)
    # a file in latitude, longitude order is caught where a "latitude" leaves [-90, 90], with a hint
    with pytest.raises(InputError, match="are the columns swapped"):
        s2.from_rows([[45.0, 10.0], [30.0, 120.0]], lonlat=True)
    with pytest.raises(InputError, match="only defined for d = 2"):
        Sphere(3).from_rows([[0.0, 0.0]], lonlat=True)
    with pytest.raises(InputError, match="d must be a positive integer"):
        Sphere(0)
    with pytest.raises(InputError, match="time must be finite and > 0"):
        s2.log_kernel(s2.random_uniform(2), s2.random_uniform(2), torch.tensor([0.1, -1.0]))


@pytest.mark.parametrize("d", [2, 4])
def test_sampler_many_times_outside_the_table(d):
    # > 64 distinct times below the cached table's range (1e-6): one table per time, no recursion. At t ~ 1e-9
    # the law of r is that of |N(0, t I_d)| up to O(t): E[r²] = d t. 4000 draws: standard error of the mean of
    # r²/(d t) is sqrt(2 / (d n)); tolerance 5 standard errors (failure rate ~6e-7).
    g = torch.Generator().manual_seed(11)
    t = 1e-9 * (1 + 1e-3 * torch.rand(4000, dtype=F64, generator=g))
    r = sample_sphere_radius(t, d, g)
    ratio = float((r * r / (d * t)).mean())
    assert abs(ratio - 1) < 5 * math.sqrt(2 / (d * 4000)), ratio
