"""SO(3) and its IGSO(3) heat kernel against external references.

References used (named beside each check):
- mpmath at 50 digits: the IGSO(3) character series and, independently, the
  image sum derived from the S^3 heat kernel (both evaluated from their
  formulas, not from heatwalk code), cross-checked against each other;
- scipy.integrate.quad for normalisation and the CDF of the rotation angle;
- scipy.stats.kstest for the sampler (fixed t, and one distinct t per draw through the probability-integral
  transform);
- the per-time CDF build (``igso3_angle_from_uniform_per_time``, itself checked against scipy quad) as the
  reference for the fast sampler's log-t table;
- a geodesic random walk (many small exact exp-map steps) for the short-time law;
- geomstats SpecialOrthogonal(n=3) (numpy backend) for exp / log / dist;
- scipy.spatial.transform.Rotation for matrix / quaternion / rotation-vector conversions.
"""

import math
import os

os.environ.setdefault("GEOMSTATS_BACKEND", "numpy")

import mpmath as mp
import numpy as np
import pytest
import torch
from scipy import integrate, stats
from scipy.interpolate import CubicHermiteSpline
from scipy.spatial.transform import Rotation

from heatwalk.errors import InputError
from heatwalk.kernels import igso3
from heatwalk.kernels.igso3 import (
    igso3_angle_cdf,
    igso3_angle_density,
    igso3_angle_from_uniform,
    igso3_angle_from_uniform_per_time,
    igso3_log_prob_and_dlog,
    igso3_sample_angle,
)
from heatwalk.spaces import SO3, from_config
from heatwalk.spaces.so3 import exp_so3, hat
from stat_thresholds import sigma_threshold, p_value_threshold

F64 = torch.float64
PI = math.pi


def gen(seed):
    return torch.Generator().manual_seed(seed)


# ---------------------------------------------------------------------------------------------
# mpmath references (50 digits)
# ---------------------------------------------------------------------------------------------
mp.mp.dps = 50
TWO_PI_MP = 2 * mp.pi


def mp_series(w, t):
    """(1/8π²) Σ_l (2l+1) e^{-l(l+1)t/2} χ_l(w), χ_l = 1 + 2 Σ_{k≤l} cos kw; returns (p, dp/dw).

    Terms kept while (2l+1)² e^{-l(l+1)t/2} > 10^-(working digits + 20).
    """
    w, t = mp.mpf(w), mp.mpf(t)
    L = 1
    while (L * (L + 1) * t / 2 - 2 * mp.log(2 * L + 1)) < (mp.mp.dps + 20) * mp.log(10):
        L += 1
    p = dp = mp.mpf(0)
    for l in range(L + 1):
        q = (2 * l + 1) * mp.exp(-l * (l + 1) * t / 2)
        p += q * (1 + 2 * mp.fsum(mp.cos(k * w) for k in range(1, l + 1)))
        dp += q * (-2 * mp.fsum(k * mp.sin(k * w) for k in range(1, l + 1)))
    return p / (8 * mp.pi**2), dp / (8 * mp.pi**2)


def mp_images(w, t):
    """(1/16)(2/(πt))^{3/2} e^{t/8} Σ_m (-1)^m (w+2πm) e^{-(w+2πm)²/2t} / sin(w/2) (S^3 image sum); log p.

    At w = 0 the 0/0 is replaced by its limit 2 Σ_m (-1)^m (1 - (2πm)²/t) e^{-(2πm)²/2t}.
    Images |m| ≤ M with (2πM - π)² / 2t > 130 ln 10.
    """
    w, t = mp.mpf(w), mp.mpf(t)
    M = int(mp.sqrt(2 * t * 130 * mp.log(10)) / TWO_PI_MP) + 2
    pref = mp.mpf(1) / 16 * (2 / (mp.pi * t)) ** mp.mpf(1.5) * mp.exp(t / 8)
    if w == 0:
        s = 2 * mp.fsum((-1) ** m * (1 - (TWO_PI_MP * m) ** 2 / t) * mp.exp(-(TWO_PI_MP * m) ** 2 / (2 * t))
                        for m in range(-M, M + 1))
    else:
        s = mp.fsum((-1) ** m * (w + TWO_PI_MP * m) * mp.exp(-(w + TWO_PI_MP * m) ** 2 / (2 * t))
                    for m in range(-M, M + 1)) / mp.sin(w / 2)
    return mp.log(pref * s)


def mp_reference(w, t):
    """Exact (log p, d/dw log p): character series for t ≥ 1, image sum (mp.diff for the derivative) below."""
    if t >= 1:
        p, dp = mp_series(w, t)
        return mp.log(p), dp / p
    lp = mp_images(w, t)
    # log p is even in w, so its derivative at 0 is exactly 0
    d = mp.mpf(0) if w == 0 else mp.diff(lambda x: mp_images(x, t), mp.mpf(w))
    return lp, d


T_GRID = np.logspace(-5, math.log10(50), 15)
W_GRID = [0.0, 1e-8, 1e-4, 0.01, 0.1, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.1, PI - 1e-6, PI - 1e-9, PI]


def test_series_and_image_sum_agree_in_mpmath():
    # mpmath, two exact forms of the same kernel: agree to 1e-40 relative where both are evaluated
    for t in [0.05, 0.3, 0.9, 1.5, 4.0]:
        for w in [0.0, 0.2, 1.3, 2.9, PI]:
            with mp.workdps(100):  # the character series cancels down to p(π) ~ e^{-π²/2t} at small t
                p_series = mp_series(w, t)[0]
            rel = abs(mp.log(p_series) - mp_images(w, t))
            assert rel < mp.mpf("1e-40"), (t, w, rel)


def test_log_prob_and_score_against_mpmath():
    # mpmath 50-digit reference; tolerance 1e-9 on log p and 1e-7 on d/dw log p, relative to max(1, |value|)
    ww, tt = np.meshgrid(W_GRID, T_GRID)
    lp, d = igso3_log_prob_and_dlog(torch.tensor(ww, dtype=F64), torch.tensor(tt, dtype=F64))
    worst_lp = worst_d = (0.0, None)
    for i, t in enumerate(T_GRID):
        for j, w in enumerate(W_GRID):
            ref_lp, ref_d = mp_reference(w, float(t))
            e_lp = float(abs(lp[i, j].item() - ref_lp) / max(1, abs(ref_lp)))
            e_d = float(abs(d[i, j].item() - ref_d) / max(1, abs(ref_d)))
            assert math.isfinite(lp[i, j].item()) and math.isfinite(d[i, j].item())
            if e_lp >= worst_lp[0]:
                worst_lp = (e_lp, (float(t), w))
            if e_d >= worst_d[0]:
                worst_d = (e_d, (float(t), w))
    msg = f"worst log p error {worst_lp[0]:.2e} at (t, w) = {worst_lp[1]}; worst score error {worst_d[0]:.2e} at {worst_d[1]}"
    print(msg)
    assert worst_lp[0] < 1e-9 and worst_d[0] < 1e-7, msg


@pytest.mark.parametrize("t", [1e-5, 1e-3, 0.05, 0.5, 1.0, 2.0, 10.0, 50.0])
def test_normalised(t):
    # scipy.integrate.quad of p_t(w) · 8π(1 - cos w) over [0, π] = 1 within 1e-10
    def f(w):
        return float(igso3_angle_density(torch.tensor(w, dtype=F64), torch.tensor(t, dtype=F64)))

    cut = min(PI, 40 * math.sqrt(t))
    total = integrate.quad(f, 0, cut, epsabs=1e-14, epsrel=1e-13, limit=200, points=[math.sqrt(t)] if cut < PI else None)[0]
    if cut < PI:
        total += integrate.quad(f, cut, PI, epsabs=1e-14, limit=200)[0]
    assert abs(total - 1) < 1e-10, total


@pytest.mark.parametrize("t", [1e-4, 1e-2, 0.3, 1.0, 3.0, 20.0])
def test_score_matches_finite_differences(t):
    # central differences of log_kernel along the orthonormal basis x L_i; error O(h²) + eps|f|/h,
    # tolerance 1e-6 · max(1, |score|)
    space = SO3()
    x0 = space.random_uniform(24, gen(1))
    xt = space.sample_forward(x0, t, gen(2))
    # add points next to the cut locus (angle π - 1e-3) and at the start point itself
    axis = torch.nn.functional.normalize(torch.randn(4, 3, dtype=F64, generator=gen(3)), dim=-1)
    xt = torch.cat([xt, x0[:4] @ exp_so3((PI - 1e-3) * axis), x0[4:6]])
    x0 = torch.cat([x0, x0[:4], x0[4:6]])
    s = space.score(xt, x0, t)
    assert torch.isfinite(s).all()
    assert s[-2:].abs().max() == 0  # at xt = x0 the score vanishes
    h = 1e-5 * math.sqrt(t)
    b = space.tangent_basis(xt)
    for i in range(3):
        e = b[:, i]
        fd = (space.log_kernel(space.exp(xt, h * e), x0, t) - space.log_kernel(space.exp(xt, -h * e), x0, t)) / (2 * h)
        an = space.inner(xt, s, e)
        err = ((fd - an).abs() / an.abs().clamp_min(1)).max()
        assert err < 1e-6, (t, i, float(err))


@pytest.mark.parametrize("inverse", [igso3_angle_from_uniform, igso3_angle_from_uniform_per_time])
@pytest.mark.parametrize("t", [1e-5, 1e-3, 0.07, 0.5, 3.0, 30.0, 2e-7, 300.0])
def test_inverse_cdf_is_exact(t, inverse):
    # scipy.integrate.quad CDF at the returned angle equals u within 1e-12 (the sampler inverts the exact CDF);
    # both the fast log-t table path and the per-time reference, and times outside the table (2e-7, 300)
    u = torch.tensor([1e-9, 1e-4, 0.01, 0.2, 0.5, 0.77, 0.99, 1 - 1e-9], dtype=F64)
    w = inverse(u, torch.full_like(u, t))

    def f(x):
        return float(igso3_angle_density(torch.tensor(x, dtype=F64), torch.tensor(t, dtype=F64)))

    for ui, wi in zip(u.tolist(), w.tolist()):
        F = integrate.quad(f, 0, wi, epsabs=1e-15, epsrel=1e-13, limit=200)[0]
        assert abs(F - ui) < 1e-12, (t, ui, wi, F)


def test_log_time_table_matches_per_time_build():
    # the table's Chebyshev interpolation in log t against the CDF polynomials built at each t (the reference
    # path): per cell, the sum of |coefficient differences| bounds the CDF error; measured worst ~1e-14 on
    # 5000 log-uniform times in [1e-6, 100] and at the piece boundaries; tolerance 1e-13
    table = igso3._log_time_table()
    lo, hi = igso3.TABLE_TIME_RANGE
    t = torch.exp(torch.empty(5000, dtype=F64).uniform_(math.log(lo), math.log(hi), generator=gen(80)))
    t = torch.cat([t, torch.exp(table.bounds), torch.tensor([(PI / 12) ** 2], dtype=F64)])
    cdf, cell_coef = table.at(t)
    _, cdf_ref, coef_ref = igso3._cdf_table(t)
    assert (cdf - cdf_ref).abs().max() < 1e-13
    for j in range(igso3.N_CELLS):
        jj = torch.full(t.shape, j, dtype=torch.long)
        err = (cell_coef(jj) - coef_ref[:, j]).abs().sum(-1).max()
        assert err < 1e-13, (j, float(err))


def test_fast_inverse_matches_per_time_reference():
    # same u, same t: the fast path's angle against the per-time reference, on 6000 distinct log-uniform
    # times spanning the table range and beyond it (1e-7 .. 1e3, so both sides of the range split are used).
    # The reference CDF at the fast angle equals u within 1e-13 (measured ~2e-15), and the angles agree to
    # 1e-10 relative where the inverse is well conditioned (u in [1e-9, 1 - 1e-9]; measured ~5e-13)
    n = 6000
    t = torch.exp(torch.empty(n, dtype=F64).uniform_(math.log(1e-7), math.log(1e3), generator=gen(81)))
    u = torch.rand(n, dtype=F64, generator=gen(82))
    u[:4] = torch.tensor([0.0, 1e-15, 1 - 1e-12, 0.5])
    w_fast = igso3_angle_from_uniform(u, t)
    w_ref = igso3_angle_from_uniform_per_time(u, t)
    assert ((w_fast >= 0) & (w_fast <= PI)).all()
    resid = (igso3_angle_cdf(w_fast, t) - u).abs().max()
    assert resid < 1e-13, float(resid)
    ok = (u > 1e-9) & (u < 1 - 1e-9)
    rel = ((w_fast - w_ref).abs() / w_ref)[ok].max()
    assert rel < 1e-10, float(rel)
    # scalar t and a 2-D batch keep their shapes
    assert igso3_angle_from_uniform(u[:6].reshape(2, 3), 0.2).shape == (2, 3)


def test_angle_sampler_ks_many_distinct_times():
    # probability-integral transform: with t_i log-uniform on SO(3)'s default time range (one distinct t per
    # draw, as in training), F_{t_i}(w_i) under the reference per-time CDF is Uniform(0, 1) for an exact
    # sampler; scipy.stats.kstest, fixed seed, p < 1e-3 with probability 1e-3 under exactness
    n = 10000
    t_min, t_max = SO3().time_range
    t = torch.exp(torch.empty(n, dtype=F64).uniform_(math.log(t_min), math.log(t_max), generator=gen(83)))
    w = igso3_sample_angle(t, gen(84))
    res = stats.kstest(igso3_angle_cdf(w, t).numpy(), "uniform")
    assert res.pvalue > p_value_threshold(1e-3), res


@pytest.mark.parametrize("t", [0.01, 0.3, 2.0])
def test_angle_sampler_ks(t):
    # scipy.stats.kstest of 20000 sampled angles vs the CDF from scipy quad on 200 cells, interpolated by the
    # cubic Hermite spline through (CDF, density) (error ~ (cell/√t)⁴/384 < 1e-6, far below the KS resolution
    # 1/sqrt(n) ~ 7e-3); fixed seed; under an exact sampler p < 1e-3 happens with probability 1e-3 per t
    n = 20000
    w = igso3_sample_angle(torch.full((n,), t, dtype=F64), gen(11)).numpy()
    hi = min(PI, 12 * math.sqrt(t))
    grid = np.linspace(0, hi, 201)

    def f(x):
        return igso3_angle_density(torch.as_tensor(x, dtype=F64), torch.tensor(t, dtype=F64)).numpy()

    pieces = [integrate.quad(f, a, b, epsabs=1e-14)[0] for a, b in zip(grid[:-1], grid[1:])]
    cdf = CubicHermiteSpline(grid, np.concatenate([[0.0], np.cumsum(pieces)]), f(grid))
    res = stats.kstest(w, lambda x: cdf(np.minimum(x, hi)))
    assert res.pvalue > p_value_threshold(1e-3), (t, res)


def test_short_time_sampler_matches_geodesic_random_walk():
    # Independent reference: geodesic random walk x <- exp(x, sqrt(dt) z), z standard Gaussian in the metric,
    # 200 steps to t = 0.4 (weak error O(dt) = O(2e-3), well below the standard error ~1e-2). Compare the mean squared angle
    # (≈ 3t at short times) within 5 combined standard errors.
    space = SO3()
    t, steps, n = 0.4, 200, 20000
    x0 = space.random_uniform(1, gen(20)).expand(n, 3, 3)
    x = x0.clone()
    g = gen(21)
    dt = t / steps
    for _ in range(steps):
        x = space.exp(x, math.sqrt(dt) * space.random_tangent(x, g))
    a_walk = space.dist(x0, x).square()
    a_exact = space.dist(x0, space.sample_forward(x0, t, gen(22))).square()
    se = math.sqrt(float(a_walk.var()) / n + float(a_exact.var()) / n)
    diff = abs(float(a_walk.mean()) - float(a_exact.mean()))
    assert diff < sigma_threshold(6e-7) * se, (float(a_walk.mean()), float(a_exact.mean()), se)


# ---------------------------------------------------------------------------------------------
# geometry vs geomstats and scipy
# ---------------------------------------------------------------------------------------------
def test_exp_log_dist_against_geomstats():
    # geomstats SpecialOrthogonal(n=3) (matrix points, numpy backend), bi-invariant metric. Its normalisation
    # equals ours (checked: |x L_i| = 1 there too, so dist = rotation angle, no constant factor); atol 1e-12
    from geomstats.geometry.special_orthogonal import SpecialOrthogonal

    gs = SpecialOrthogonal(n=3)
    space = SO3()
    x = space.random_uniform(50, gen(30))
    y = space.random_uniform(50, gen(31))
    v = 2.5 * torch.nn.functional.normalize(space.random_tangent(x, gen(32)).flatten(1), dim=-1).reshape(-1, 3, 3)
    v = v * torch.rand(50, 1, 1, dtype=F64, generator=gen(33)) * math.sqrt(2)  # lengths up to 2.5 (< π)
    xn, yn, vn = x.numpy(), y.numpy(), v.numpy()
    basis = space.tangent_basis(x).numpy()
    np.testing.assert_allclose(gs.metric.norm(basis[:, 0], xn), 1.0, atol=1e-12)
    np.testing.assert_allclose(space.exp(x, v).numpy(), gs.metric.exp(vn, xn), atol=1e-12)
    np.testing.assert_allclose(space.log(x, y).numpy(), gs.metric.log(yn, xn), atol=1e-10)
    np.testing.assert_allclose(space.dist(x, y).numpy(), gs.metric.dist(xn, yn), atol=1e-10)


def test_log_near_identity_and_pi():
    # log ∘ exp is the identity up to 1e-12 for angles 1e-12 .. π - 1e-12; at π exactly exp(log) recovers y
    space = SO3()
    axis = torch.nn.functional.normalize(torch.randn(6, 3, dtype=F64, generator=gen(40)), dim=-1)
    x = space.random_uniform(6, gen(41))
    for ang in [0.0, 1e-12, 1e-7, 1.0, PI - 1e-7, PI - 1e-12]:
        v = x @ hat(ang * axis)
        y = space.exp(x, v)
        torch.testing.assert_close(space.log(x, y), v, atol=1e-9 if ang > 3 else 1e-12, rtol=0)
        torch.testing.assert_close(space.dist(x, y), torch.full((6,), ang, dtype=F64), atol=1e-12, rtol=0)
    y = x @ exp_so3(PI * axis)
    torch.testing.assert_close(space.exp(x, space.log(x, y)), y, atol=1e-12, rtol=0)
    torch.testing.assert_close(space.dist(x, y), torch.full((6,), PI, dtype=F64), atol=1e-12, rtol=0)


def _random_quat_xyzw(n, seed):
    q = np.random.default_rng(seed).normal(size=(n, 4))
    return q / np.linalg.norm(q, axis=1, keepdims=True)


def test_conversions_against_scipy():
    # scipy.spatial.transform.Rotation: quaternion (both orders), rotvec (radians / degrees), matrix; atol 1e-12
    space = SO3()
    q = _random_quat_xyzw(200, 50)
    r = Rotation.from_quat(q)  # scipy: scalar-last
    m = r.as_matrix()
    np.testing.assert_allclose(space.from_rows(q, rotation_format="quaternion", quaternion_order="xyzw").numpy(), m, atol=1e-12)
    np.testing.assert_allclose(space.from_rows(q[:, [3, 0, 1, 2]], rotation_format="quaternion", quaternion_order="wxyz").numpy(), m, atol=1e-12)
    rv = r.as_rotvec()
    np.testing.assert_allclose(space.from_rows(rv, rotation_format="rotvec").numpy(), m, atol=1e-12)
    np.testing.assert_allclose(space.from_rows(np.rad2deg(rv), rotation_format="rotvec", degrees=True).numpy(), m, atol=1e-12)
    np.testing.assert_allclose(space.from_rows(m.reshape(-1, 9)).numpy(), m, atol=1e-12)

    x = torch.tensor(m)
    qc = r.as_quat(canonical=True)  # w ≥ 0, as heatwalk writes them
    np.testing.assert_allclose(space.to_rows(x, rotation_format="quaternion", quaternion_order="xyzw").numpy(), qc, atol=1e-12)
    np.testing.assert_allclose(space.to_rows(x, rotation_format="quaternion", quaternion_order="wxyz").numpy(), qc[:, [3, 0, 1, 2]], atol=1e-12)
    np.testing.assert_allclose(space.to_rows(x, rotation_format="rotvec").numpy(), rv, atol=1e-12)
    np.testing.assert_allclose(space.to_rows(x, rotation_format="rotvec", degrees=True).numpy(), r.as_rotvec(degrees=True), atol=1e-10)
    np.testing.assert_allclose(space.to_rows(x).numpy(), m.reshape(-1, 9), atol=0)
    assert space.column_names(rotation_format="quaternion", quaternion_order="xyzw") == ["qx", "qy", "qz", "qw"]
    assert len(space.column_names()) == 9 and len(space.column_names(rotation_format="rotvec")) == 3

    # rotations by nearly π and nearly 0: scipy.Rotation from_rotvec / as_matrix, atol 1e-12
    axis = np.random.default_rng(51).normal(size=(20, 3))
    axis /= np.linalg.norm(axis, axis=1, keepdims=True)
    for ang in [1e-10, PI - 1e-10]:
        mm = Rotation.from_rotvec(ang * axis).as_matrix()
        np.testing.assert_allclose(space.to_rows(torch.tensor(mm), rotation_format="rotvec").numpy(), ang * axis, atol=1e-12)
        np.testing.assert_allclose(space.from_rows(ang * axis, rotation_format="rotvec").numpy(), mm, atol=1e-12)


def test_validation_errors():
    space = SO3()
    good = space.random_uniform(3, gen(60))
    bad = good.clone()
    bad[1, 0, 0] += 1e-3
    with pytest.raises(InputError, match=r"row 1: not a rotation matrix.*tolerance 1e-06"):
        space.validate(bad)
    refl = good.clone()
    refl[0] = -refl[0]
    with pytest.raises(InputError, match=r"row 0: determinant -1.*reflection"):
        space.validate(refl)
    nan = good.clone()
    nan[2, 1, 1] = float("nan")
    with pytest.raises(InputError, match=r"row 2 contains NaN"):
        space.validate(nan)
    with pytest.raises(InputError, match=r"expected shape \(n, 3, 3\)"):
        space.validate(torch.zeros(3, 3, 4, dtype=F64))
    with pytest.raises(InputError, match=r"takes 9 columns"):
        space.from_rows(np.zeros((2, 8)))
    with pytest.raises(InputError, match=r"takes 4 columns"):
        space.from_rows(np.zeros((2, 3)), rotation_format="quaternion", quaternion_order="wxyz")

    q = _random_quat_xyzw(4, 61)
    with pytest.raises(InputError, match="quaternion component order must be stated: wxyz or xyzw"):
        space.from_rows(q, rotation_format="quaternion")
    with pytest.raises(InputError, match="must be wxyz or xyzw"):
        space.from_rows(q, rotation_format="quaternion", quaternion_order="wzyx")
    qz = q.copy()
    qz[2] = 0
    with pytest.raises(InputError, match=r"row 2: zero quaternion"):
        space.from_rows(qz, rotation_format="quaternion", quaternion_order="xyzw")
    qn = q.copy()
    qn[3] *= 1.01
    with pytest.raises(InputError, match=r"row 3: quaternion is not a unit quaternion.*1e-06"):
        space.from_rows(qn, rotation_format="quaternion", quaternion_order="xyzw")
    with pytest.raises(InputError, match="unknown rotation format"):
        space.from_rows(q, rotation_format="euler")
    with pytest.raises(InputError, match="degrees applies to format 'rotvec' only"):
        space.from_rows(np.zeros((1, 9)), degrees=True)
    with pytest.raises(InputError, match="order applies to quaternions only"):
        space.from_rows(np.zeros((1, 3)), rotation_format="rotvec", quaternion_order="wxyz")

    # within tolerance: projected onto SO(3) (orthogonal to rounding)
    near = good + 1e-8 * torch.randn(3, 3, 3, dtype=F64, generator=gen(62))
    v = space.validate(near)
    eye = torch.eye(3, dtype=F64)
    assert (v.transpose(-1, -2) @ v - eye).abs().max() < 1e-14 and (v - good).abs().max() < 1e-7
    qq = q.copy()
    qq[0] *= 1 + 5e-7  # within the unit tolerance: normalised
    m = space.from_rows(qq, rotation_format="quaternion", quaternion_order="xyzw")
    np.testing.assert_allclose(m.numpy(), Rotation.from_quat(q).as_matrix(), atol=1e-12)


def test_config_volume_embed_and_uniform():
    space = SO3()
    assert from_config(space.config()) == space and space.config() == {"kind": "so3"}
    assert space.log_volume == pytest.approx(math.log(8 * PI**2), rel=1e-15)
    x = space.random_uniform(5, gen(70))
    assert space.embed(x).shape == (5, 9) and space.embed_dim == 9
    # Haar law: the rotation angle has density (1 - cos w)/π; kstest against its CDF (w - sin w)/π, fixed seed
    w = space.dist(torch.eye(3, dtype=F64).expand(20000, 3, 3), space.random_uniform(20000, gen(71))).numpy()
    assert stats.kstest(w, lambda a: (a - np.sin(a)) / PI).pvalue > p_value_threshold(1e-3)
