"""Torus T^n: the wrapped-normal heat kernel against independent references."""

import math

import mpmath as mp
import numpy as np
import pytest
import scipy.integrate
import scipy.stats
import torch

from heatwalk import InputError
from heatwalk.kernels.wrapped_normal import wrap_angle, wrapped_normal_log_prob_and_score
from heatwalk.spaces import Torus

mp.mp.dps = 50

TIMES = [1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 0.1, 0.5, 1.0, 1.9, 2.0, 2.1, 5.0, 20.0, 100.0, 1e3]
ANGLES = [0.0, 1e-9, 0.3, 1.0, 2.0, 3.0, math.pi - 1e-9, -(math.pi - 1e-9), -math.pi, -2.5, -1e-3]


def mp_image_sum(d, t):
    """log p and d/dd log p from the image sum at 50 digits (independent of heatwalk's truncation)."""
    d, t = mp.mpf(d), mp.mpf(t)
    K = int(mp.ceil(mp.sqrt(2 * t * 120) / (2 * mp.pi))) + 2
    p = mp.fsum(mp.exp(-(d + 2 * mp.pi * k) ** 2 / (2 * t)) for k in range(-K, K + 1)) / mp.sqrt(2 * mp.pi * t)
    dp = mp.fsum(-(d + 2 * mp.pi * k) / t * mp.exp(-(d + 2 * mp.pi * k) ** 2 / (2 * t))
                 for k in range(-K, K + 1)) / mp.sqrt(2 * mp.pi * t)
    return mp.log(p), dp / p


def mp_theta(d, t):
    """log p and its derivative from Jacobi's theta function: p = θ₃(d/2, e^{-t/2}) / 2π (mpmath.jtheta)."""
    d, t = mp.mpf(d), mp.mpf(t)
    q = mp.exp(-t / 2)
    p = mp.jtheta(3, d / 2, q) / (2 * mp.pi)
    dp = mp.jtheta(3, d / 2, q, 1) / 2 / (2 * mp.pi)
    return mp.log(p), dp / p


def test_log_kernel_and_score_against_mpmath():
    # Reference: 50-digit image sum for t <= 1 and mpmath.jtheta for t >= 0.1 (the two agree where both run).
    # Tolerances (from the issue): log p within 1e-10, score within 1e-8, relative to max(1, |value|).
    worst_lp = worst_sc = (0.0, (0.0, 0.0))
    for t in TIMES:
        d = torch.tensor(ANGLES, dtype=torch.float64)
        lp, sc = wrapped_normal_log_prob_and_score(wrap_angle(d), torch.full_like(d, t))
        for i, a in enumerate(ANGLES):
            a_w = float(wrap_angle(torch.tensor(a, dtype=torch.float64)))
            ref = mp_image_sum(a_w, t) if t <= 1 else mp_theta(a_w, t)
            if 0.1 <= t <= 1:
                alt = mp_theta(a_w, t)
                assert abs(ref[0] - alt[0]) < mp.mpf(10) ** -30  # the two 50-digit references agree
            e_lp = abs(float(lp[i]) - float(ref[0])) / max(1.0, abs(float(ref[0])))
            e_sc = abs(float(sc[i]) - float(ref[1])) / max(1.0, abs(float(ref[1])))
            assert math.isfinite(float(lp[i])) and math.isfinite(float(sc[i]))
            worst_lp = max(worst_lp, (e_lp, (t, a)))
            worst_sc = max(worst_sc, (e_sc, (t, a)))
    assert worst_lp[0] < 1e-10, f"worst log p error {worst_lp}"
    assert worst_sc[0] < 1e-8, f"worst score error {worst_sc}"


@pytest.mark.parametrize("t", [1e-3, 0.3, 2.0, 7.0])
def test_density_integrates_to_one(t):
    # scipy.integrate.quad over one period; tolerance 1e-9 (quad's own error is far below it)
    f = lambda a: float(torch.exp(wrapped_normal_log_prob_and_score(
        torch.tensor(a, dtype=torch.float64), torch.tensor(t, dtype=torch.float64))[0]))
    points = [0.0] if t < 0.1 else None
    val, err = scipy.integrate.quad(f, -math.pi, math.pi, points=points, limit=200, epsabs=1e-13)
    assert abs(val - 1) < 1e-9


def test_uniform_at_large_time():
    # as t -> inf the wrapped normal tends to the uniform density 1/(2π); at t = 100 the first
    # Fourier term is 2 exp(-50) ~ 4e-22, so equality to 1e-15 (published series, see module docstring)
    d = torch.linspace(-math.pi, math.pi - 1e-6, 50, dtype=torch.float64)
    lp, sc = wrapped_normal_log_prob_and_score(d, torch.full_like(d, 100.0))
    torch.testing.assert_close(lp, torch.full_like(lp, -math.log(2 * math.pi)), atol=1e-15, rtol=0)
    assert float(sc.abs().max()) < 1e-15


@pytest.mark.parametrize("t", [1e-4, 0.05, 0.8, 3.0])
def test_score_is_finite_difference_of_log_kernel(t):
    # central differences with step h = 1e-6 sqrt(t); truncation O(h^2) -> relative 1e-6 of the scale 1/sqrt(t)
    T = Torus(3)
    g = torch.Generator().manual_seed(0)
    x0 = T.random_uniform(100, g)
    xt = T.sample_forward(x0, t, g)
    s = T.score(xt, x0, t)
    h = 1e-6 * math.sqrt(t)
    for i in range(3):
        e = torch.zeros(3, dtype=torch.float64)
        e[i] = h
        fd = (T.log_kernel(T.exp(xt, e), x0, t) - T.log_kernel(T.exp(xt, -e), x0, t)) / (2 * h)
        torch.testing.assert_close(fd, s[:, i], atol=1e-5 / math.sqrt(t), rtol=1e-6)


@pytest.mark.parametrize("t", [0.01, 0.7, 4.0])
def test_exact_sampler_matches_density(t):
    # Kolmogorov–Smirnov test (scipy.stats.kstest) of the wrapped difference against the CDF obtained
    # by quad of the kernel; fixed seed, significance 1e-3 (failure rate 1e-3 if the sampler is exact).
    T = Torus(1)
    x0 = torch.tensor([[2.9]], dtype=torch.float64).expand(20000, 1)
    xt = T.sample_forward(x0, t, torch.Generator().manual_seed(3))
    d = wrap_angle(xt - x0)[:, 0].numpy()
    f = lambda a: float(torch.exp(wrapped_normal_log_prob_and_score(
        torch.tensor(a, dtype=torch.float64), torch.tensor(t, dtype=torch.float64))[0]))
    grid = np.linspace(-math.pi, math.pi, 2001)
    dens = np.array([f(a) for a in grid])
    cdf_vals = np.concatenate([[0], np.cumsum((dens[1:] + dens[:-1]) / 2 * np.diff(grid))])
    cdf = lambda a: np.interp(a, grid, cdf_vals)
    assert scipy.stats.kstest(d, cdf).pvalue > 1e-3


def test_wrapped_normal_agrees_with_scipy_vonmises_limit():
    # Independent source: for small t the wrapped normal and the von Mises law with kappa = 1/t agree
    # to O(t) (scipy.stats.vonmises); checked at t = 1e-3 to within 2e-3 nats near the mode.
    t = 1e-3
    d = torch.linspace(-0.05, 0.05, 11, dtype=torch.float64)
    lp, _ = wrapped_normal_log_prob_and_score(d, torch.full_like(d, t))
    ref = scipy.stats.vonmises.logpdf(d.numpy(), 1 / t)
    assert np.max(np.abs(lp.numpy() - ref)) < 2e-3


def test_wrap_convention():
    a = torch.tensor([math.pi, -math.pi, 3 * math.pi, -1e-17, 2 * math.pi - 1e-15], dtype=torch.float64)
    w = wrap_angle(a)
    assert bool(((w >= -math.pi) & (w < math.pi)).all())


def test_validate_errors_name_the_row():
    T = Torus(2)
    with pytest.raises(InputError, match="row 1 contains NaN"):
        T.validate([[0.0, 1.0], [float("nan"), 0.0]])
    with pytest.raises(InputError, match=r"expected shape \(n, 2\)"):
        T.validate([[0.0, 1.0, 2.0]])
    with pytest.raises(InputError, match="row 0.*outside"):
        T.validate([[50.0, 1.0]])
    with pytest.raises(InputError, match="degrees"):
        T.from_rows(np.array([[0.0, 1.0], [100.0, 10.0]]))
    # degrees are read and wrapped: 270° -> -90°
    x = T.from_rows(np.array([[270.0, -45.0]]), degrees=True)
    torch.testing.assert_close(x, torch.tensor([[-math.pi / 2, -math.pi / 4]], dtype=torch.float64))
    with pytest.raises(InputError, match="n must be a positive integer"):
        Torus(0)
