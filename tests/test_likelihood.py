"""Probability-flow ODE log-likelihoods: oracle checks with exact scores, Hutchinson vs exact divergence."""

import math

import pytest
import torch

from heatwalk.core.fields import ScoreField
from heatwalk.samplers.flow_ode import FlowField, log_likelihood
from heatwalk.samplers.probability_flow import probability_flow
from heatwalk.core.schedule import TimeSchedule
from heatwalk.spaces import SO3, Sphere, Torus
from stat_thresholds import sigma_threshold

SPACES = {"torus2": lambda: Torus(2), "sphere2": lambda: Sphere(2), "so3": lambda: SO3()}


def heat_kernel_field(space, mu, s):
    """Exact score of the time-t marginal when the data law is the heat kernel p_s(· | mu):
    by the semigroup property p_t * p_s = p_{s+t} (Chapman–Kolmogorov), the marginal is p_{s+t}(· | mu)."""
    sched = TimeSchedule(*space.time_range)
    return ScoreField(space, sched, lambda x, t: space.score(x, mu.expand_as(x), t + s))


@pytest.mark.parametrize("name", sorted(SPACES))
@pytest.mark.parametrize("method", ["rk4", "dopri5"])
def test_oracle_heat_kernel_likelihood(name, method):
    # The ODE with the exact marginal score must reproduce log p_{s + t_min}(x | mu) (semigroup property);
    # tolerance 1e-3 nats (from the issue). The remaining error is the prior mismatch at t_max (~1e-4).
    space = SPACES[name]()
    g = torch.Generator().manual_seed(0)
    mu = space.random_uniform(1, g)
    s = 0.3
    field = heat_kernel_field(space, mu, s)
    x = space.sample_forward(mu.expand(6, *space.ambient_shape), s, g)
    out = log_likelihood(field, x, method=method, steps=60, rtol=1e-6, atol=1e-7)
    exact = space.log_kernel(x, mu.expand_as(x), s + space.time_range[0])
    err = (out["log_prob"] - exact).abs().max()
    assert float(err) < 1e-3, (out["log_prob"], exact)
    assert out["divergence"] == "exact"


@pytest.mark.parametrize("name", sorted(SPACES))
def test_uniform_law_gives_minus_log_volume(name):
    # A uniform data law has zero score at every t, so log p = -log vol exactly (the total volumes:
    # (2π)² for T², 4π for S², 8π² for SO(3) — standard formulas).
    space = SPACES[name]()
    field = ScoreField(space, TimeSchedule(*space.time_range), lambda x, t: torch.zeros_like(x))
    x = space.random_uniform(5, torch.Generator().manual_seed(1))
    out = log_likelihood(field, x, method="rk4", steps=10)
    expected = {"torus2": 2 * math.log(2 * math.pi), "sphere2": math.log(4 * math.pi),
                "so3": math.log(8 * math.pi**2)}[name]
    torch.testing.assert_close(out["log_prob"], torch.full((5,), -expected, dtype=torch.float64),
                               atol=1e-12, rtol=0)


def test_hutchinson_agrees_with_exact_divergence_within_its_standard_error():
    # Hutchinson's estimator is unbiased (Hutchinson 1989); with 64 probes the difference to the exact
    # divergence must lie within 5 standard errors at every point (failure rate < 1e-5 per point if Gaussian).
    space = SO3()
    g = torch.Generator().manual_seed(2)
    mu = space.random_uniform(1, g)
    field = heat_kernel_field(space, mu, 0.2)
    x = space.sample_forward(mu.expand(20, 3, 3), 0.5, g)
    t = torch.full((20,), 0.1, dtype=torch.float64)
    _, exact, _ = FlowField(field, divergence="exact").velocity_and_divergence(x, t)
    _, est, se = FlowField(field, divergence="hutchinson", n_probes=64,
                           generator=torch.Generator().manual_seed(3)).velocity_and_divergence(x, t)
    z = (est - exact) / se
    assert float(z.abs().max()) < 5, z


def test_riemannian_divergence_on_the_sphere_matches_the_laplacian():
    # div_M of the Riemannian gradient of log p is the Laplace–Beltrami of log p; for the heat kernel
    # the field v = -(1/2) ∇ log p_t, and the continuity equation with the heat equation gives
    # div(p v) = -(1/2) Δ p, i.e. div v = -(1/2)(Δ log p) where Δ log p = Δp/p - |∇ log p|².
    # Independent check: Δp/p = 2 ∂_t log p (heat equation, generator (1/2)Δ), ∂_t by central differences.
    space = Sphere(2)
    g = torch.Generator().manual_seed(4)
    mu = space.random_uniform(1, g)
    s = 0.4
    field = heat_kernel_field(space, mu, s)
    x = space.sample_forward(mu.expand(10, 3), s, g)
    t = 0.1
    _, div, _ = FlowField(field).velocity_and_divergence(x, torch.full((10,), t, dtype=torch.float64))
    m = mu.expand_as(x)
    h = 1e-5
    dt_logp = (space.log_kernel(x, m, t + s + h) - space.log_kernel(x, m, t + s - h)) / (2 * h)
    grad = space.score(x, m, t + s)
    lap_log = 2 * dt_logp - (grad * grad).sum(-1)
    torch.testing.assert_close(div, -0.5 * lap_log, atol=1e-6, rtol=1e-6)


def test_probability_flow_sampler_reproduces_the_heat_kernel_law():
    # Samples of the ODE started from the uniform prior with the exact score follow p_{s+t_min}(· | mu):
    # E[cos d(x, mu)] compared with the space's exact sampler, within 5 standard errors (2000 points each).
    space = Torus(2)
    g = torch.Generator().manual_seed(5)
    mu = space.random_uniform(1, g)
    s = 0.3
    field = heat_kernel_field(space, mu, s)
    x = probability_flow(field, 2000, steps=60, generator=g, progress=False)
    ref = space.sample_forward(mu.expand(2000, 2), s + space.time_range[0], g)
    a = torch.cos(space.dist(x, mu.expand_as(x)))
    b = torch.cos(space.dist(ref, mu.expand_as(ref)))
    se = math.sqrt(float(a.var() + b.var()) / 2000)
    assert abs(float(a.mean() - b.mean())) < sigma_threshold(6e-7) * se
