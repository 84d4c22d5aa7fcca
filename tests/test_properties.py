"""Property-based checks (hypothesis) of conventions every caller relies on."""

import math

import torch
from hypothesis import given, settings
from hypothesis import strategies as st

from heatwalk.kernels.wrapped_normal import wrap_angle, wrapped_normal_log_prob_and_score
from heatwalk.spaces import SO3, Sphere, Torus

finite_angles = st.floats(min_value=-50.0, max_value=50.0, allow_nan=False, allow_infinity=False)


@given(finite_angles)
def test_wrap_lands_in_half_open_interval_and_keeps_the_angle(a):
    # convention (DESIGN.md): angles wrapped to [-π, π); the wrapped angle differs by a multiple of 2π
    w = float(wrap_angle(torch.tensor(a, dtype=torch.float64)))
    assert -math.pi <= w < math.pi
    k = (a - w) / (2 * math.pi)
    assert abs(k - round(k)) < 1e-9


@given(st.floats(min_value=-math.pi, max_value=math.pi), st.floats(min_value=1e-6, max_value=1e3))
@settings(max_examples=200)
def test_wrapped_normal_is_symmetric_and_finite(d, t):
    # p_t(d) = p_t(-d) (the law is symmetric), so log p is even and the score is odd — an exact identity
    x = torch.tensor([d, -d], dtype=torch.float64)
    lp, sc = wrapped_normal_log_prob_and_score(wrap_angle(x), torch.full_like(x, t))
    assert torch.isfinite(lp).all() and torch.isfinite(sc).all()
    if abs(abs(d) - math.pi) > 1e-6:  # away from the seam, where -d wraps to the other side
        assert abs(float(lp[0] - lp[1])) <= 1e-12 * max(1.0, abs(float(lp[0])))
        assert abs(float(sc[0] + sc[1])) <= 1e-9 * max(1.0, abs(float(sc[0])))


@given(st.integers(min_value=0, max_value=2**31 - 1), st.sampled_from(["torus", "sphere", "so3"]))
@settings(max_examples=30, deadline=None)
def test_exp_of_log_returns_the_point(seed, kind):
    # geometry identity exp_x(log_x(y)) = y for y off the cut locus (common practice: 1e-9 in float64)
    space = {"torus": Torus(3), "sphere": Sphere(2), "so3": SO3()}[kind]
    g = torch.Generator().manual_seed(seed)
    x = space.random_uniform(16, g)
    y = space.random_uniform(16, g)
    keep = space.dist(x, y) < math.pi - 1e-3
    y2 = space.exp(x, space.log(x, y))
    err = (y2 - y).reshape(16, -1).abs().amax(-1)
    assert bool((err[keep] < 1e-9).all())
