"""The contract every continuous space passes (run by tests/test_contract.py).

Each check compares two independent computations inside the space's own
protocol (finite differences vs. the analytic score, the exact sampler vs.
quadrature by importance sampling from the prior, exp vs. log). The numerical
values of each kernel are checked against external references in the space's
own test module.

Test points are drawn from ``space.prior_sample`` and densities compared with
``space.prior_log_prob``: for a compact space these are the uniform law and
-log_volume; a non-compact space (the simplex) has no uniform law and supplies
its stationary law instead, so the same checks apply to both.
"""

from __future__ import annotations

import math

import torch

from heatwalk.spaces.base import Space
from heatwalk.spaces.manifold import Manifold
from stat_thresholds import sigma_threshold


def gen(seed: int = 0) -> torch.Generator:
    return torch.Generator().manual_seed(seed)


def check_validate_roundtrip(space: Space):
    x = space.prior_sample(64, gen(1))
    y = space.validate(x)
    assert y.shape == (64, *space.ambient_shape)
    # common practice: validated points sit on the manifold to a few ulps
    torch.testing.assert_close(space.project(y), y, atol=1e-12, rtol=0)


def check_exp_log_inverse(space: Space):
    x = space.prior_sample(256, gen(2))
    v = 0.5 * space.random_tangent(x, gen(3))  # short vectors: well inside the injectivity radius
    y = space.exp(x, v)
    torch.testing.assert_close(space.project(y), y, atol=1e-12, rtol=0)
    torch.testing.assert_close(space.log(x, y), v, atol=1e-9, rtol=0)
    torch.testing.assert_close(space.dist(x, y), space.norm(x, v), atol=1e-9, rtol=0)


def check_tangent_basis_orthonormal(space: Space):
    x = space.prior_sample(16, gen(4))
    b = space.tangent_basis(x)  # (16, dim, *ambient)
    assert b.shape == (16, space.dim, *space.ambient_shape)
    for i in range(space.dim):
        ei = b[:, i]
        torch.testing.assert_close(space.to_tangent(x, ei), ei, atol=1e-12, rtol=0)
        for j in range(space.dim):
            g = space.inner(x, ei, b[:, j])
            torch.testing.assert_close(g, torch.full_like(g, float(i == j)), atol=1e-12, rtol=0)


def check_random_tangent_covariance(space: Space):
    # A standard Gaussian in the metric has E<z, e_i><z, e_j> = δ_ij; 20k draws, failure rate 2e-9 (≈ 6 standard errors).
    x = space.prior_sample(1, gen(5)).expand(20000, *space.ambient_shape).clone()
    z = space.random_tangent(x, gen(6))
    b = space.tangent_basis(x)
    c = torch.stack([space.inner(x, z, b[:, i]) for i in range(space.dim)], dim=-1)
    cov = c.T @ c / c.shape[0]
    se = math.sqrt(2.0 / c.shape[0])
    assert torch.allclose(cov, torch.eye(space.dim, dtype=cov.dtype), atol=sigma_threshold(2e-9) * se)


def check_score_is_gradient(space: Space, times=(1e-3, 0.05, 0.7, 3.0)):
    x0 = space.prior_sample(32, gen(7))
    for t in times:
        xt = space.sample_forward(x0, t, gen(8))
        s = space.score(xt, x0, t)
        torch.testing.assert_close(space.to_tangent(xt, s), s, atol=1e-9 * (1 + s.abs().max()), rtol=0)
        h = 1e-5 * math.sqrt(t)
        b = space.tangent_basis(xt)
        for i in range(space.dim):
            e = b[:, i]
            fd = (space.log_kernel(space.exp(xt, h * e), x0, t)
                  - space.log_kernel(space.exp(xt, -h * e), x0, t)) / (2 * h)
            an = space.inner(xt, s, e)
            # central differences: error O(h^2 |f'''|) plus rounding eps|f|/h; relative 1e-5 of the scale 1/sqrt(t)
            torch.testing.assert_close(fd, an, atol=1e-5 / math.sqrt(t), rtol=1e-5)


def check_kernel_normalised_and_sampler_exact(space: Space, times=(0.05, 0.5, 2.0), n=200_000):
    """∫ p_t(x|x0) dvol = 1 and E_sampler[g] = ∫ g p_t dvol, both by importance sampling from the prior.

    The weights p_t / prior have a variance growing exponentially with the
    dimension as t -> 0; high-dimensional spaces pass larger ``times``.
    """
    x0 = space.prior_sample(1, gen(9))
    u = space.prior_sample(n, gen(10))
    for t in times:
        w = torch.exp(space.log_kernel(u, x0.expand_as(u), t) - space.prior_log_prob(u))  # p / prior density
        se_w = float(w.std()) / math.sqrt(n)
        assert abs(float(w.mean()) - 1) < sigma_threshold(2e-9) * se_w + 1e-12, (t, float(w.mean()), se_w)
        g_u = torch.cos(space.dist(u, x0.expand_as(u)))
        quad = w * g_u
        xs = space.sample_forward(x0.expand(n, *space.ambient_shape), t, gen(11))
        g_s = torch.cos(space.dist(xs, x0.expand_as(xs)))
        se = math.sqrt(float(quad.var()) / n + float(g_s.var()) / n)
        assert abs(float(quad.mean()) - float(g_s.mean())) < sigma_threshold(2e-9) * se, (t, float(quad.mean()), float(g_s.mean()), se)


def check_prior_at_large_time(space: Space):
    # at t_max the law is (close to) the prior: log p_t = prior log-density (uniform: -log vol) within 1e-3 nats
    x0 = space.prior_sample(8, gen(12))
    x = space.prior_sample(8, gen(13))
    lk = space.log_kernel(x, x0, space.time_range[1])
    torch.testing.assert_close(lk, space.prior_log_prob(x), atol=1e-3, rtol=0)


ALL_CHECKS = [
    check_validate_roundtrip,
    check_exp_log_inverse,
    check_tangent_basis_orthonormal,
    check_random_tangent_covariance,
    check_score_is_gradient,
    check_kernel_normalised_and_sampler_exact,
    check_prior_at_large_time,
]


def check_log_kernel_and_score_agree(space: Space):
    # the combined evaluation must equal the two separate ones (same kernel, shared work); the distance may be
    # computed by a different but equivalent formula, hence a few-ulp absolute allowance scaled by |value|
    x0 = space.random_uniform(64, gen(14)) if math.isfinite(space.log_volume) else space.prior_sample(64, gen(14))
    t = torch.logspace(-3, 0.5, 64, dtype=torch.float64)
    xt = space.sample_forward(x0, t, gen(15))
    lp, sc = space.log_kernel_and_score(xt, x0, t)
    torch.testing.assert_close(lp, space.log_kernel(xt, x0, t), atol=1e-13, rtol=1e-13)
    torch.testing.assert_close(sc, space.score(xt, x0, t), atol=1e-13, rtol=1e-13)


ALL_CHECKS.append(check_log_kernel_and_score_agree)


def check_batch_shapes(space: Space):
    """Points of shape (..., *ambient_shape), as the base class promises: results have the batch shape and
    equal the flat computation (same draws, same values); x0 and t broadcast against xt."""
    x0 = space.prior_sample(6, gen(16)).reshape(2, 3, *space.ambient_shape)
    t = torch.tensor([[0.01, 0.1, 0.9], [0.05, 0.5, 0.99]], dtype=torch.float64)
    xt = space.sample_forward(x0, t, gen(17))
    flat = space.sample_forward(x0.reshape(6, *space.ambient_shape), t.reshape(6), gen(17))
    assert xt.shape == x0.shape
    torch.testing.assert_close(xt.reshape(flat.shape), flat, atol=0, rtol=0)
    lk = space.log_kernel(xt, x0, t)
    assert lk.shape == (2, 3)
    torch.testing.assert_close(lk.reshape(6), space.log_kernel(flat, x0.reshape(flat.shape), t.reshape(6)),
                               atol=0, rtol=0)
    # one x0 (batch shape (1,)) and one t against a (2, 3) batch of xt
    one = x0[:1, :1]
    lk1 = space.log_kernel(xt, one, 0.3)
    assert lk1.shape == (2, 3)
    torch.testing.assert_close(lk1.reshape(6), space.log_kernel(flat, one.reshape(1, *space.ambient_shape)
                                                                .expand_as(flat), torch.full((6,), 0.3,
                                                                                           dtype=torch.float64)),
                               atol=0, rtol=0)
    if isinstance(space, Manifold):  # the finite-space contract calls this check too
        sc = space.score(xt, x0, t)
        assert sc.shape == xt.shape
        lk2, sc2 = space.log_kernel_and_score(xt, x0, t)
        assert lk2.shape == (2, 3) and sc2.shape == xt.shape
        torch.testing.assert_close(sc.reshape(flat.shape), space.score(flat, x0.reshape(flat.shape), t.reshape(6)),
                                   atol=0, rtol=0)


def check_times_are_checked(space: Space):
    """Every time must be finite, > 0 and at most the space's max_time: one InputError wording for all."""
    import pytest

    from heatwalk import InputError

    x0 = space.prior_sample(3, gen(18))
    for bad in (0.0, -1.0, float("nan"), float("inf")):
        with pytest.raises(InputError, match="diffusion time must be finite and > 0"):
            space.sample_forward(x0, bad, gen(19))
        with pytest.raises(InputError, match="diffusion time must be finite and > 0"):
            space.log_kernel(x0, x0, torch.tensor([0.5, bad, 0.5], dtype=torch.float64))
    with pytest.raises(InputError, match="expected a tensor of shape"):
        space.log_kernel(torch.zeros(3, *[k + 1 for k in space.ambient_shape], dtype=x0.dtype), x0, 0.5)


ALL_CHECKS += [check_batch_shapes, check_times_are_checked]

#: the checks that apply to finite state spaces too (no geometry)
FINITE_CHECKS = [check_batch_shapes, check_times_are_checked]
