"""The adaptive probability-flow solver: per-point step control, fixed Hutchinson probes, the step cap.

Oracles (exact scores, exact log-likelihoods, outside the library's learned parts):
- R^d under the Ornstein–Uhlenbeck flow with a Gaussian-mixture data law: the time-t marginal is the
  mixture of N(a μ_k, (a² σ_k² + 1 − a²) I), a = e^{-t/2} (Gaussian convolution, closed form);
- the simplex with a logistic-normal target ilr(x_0) ~ N(μ, σ² I): the marginal is
  N(ilr x; a μ, (a² σ² + 1 − a²) I), plus ``log_volume_density`` (w.r.t. Lebesgue on x_1 … x_{K-1}),
  the reference used in tests/test_simplex.py.
Hutchinson's estimator (Hutchinson 1989) is unbiased when E[z zᵀ] = I in the metric; its error is
checked against its own standard error with a Student-t threshold from scipy.stats.t (the standard
error is estimated from the probes).
"""

from __future__ import annotations

import math

import pytest
import scipy.stats
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.core.fields import ScoreField
from heatwalk.core.schedule import TimeSchedule
from heatwalk.samplers.flow_ode import log_likelihood
from heatwalk.spaces import SO3, Euclidean, Simplex, Sphere, Torus
from heatwalk.spaces.simplex import helmert_basis, ilr, ilr_inverse

F64 = torch.float64


def gen(seed):
    return torch.Generator().manual_seed(seed)


def t_threshold(failure_rate, n_probes, checks):
    """|T| bound of a Student-t with n_probes − 1 degrees of freedom, two-sided, shared by ``checks`` checks."""
    return float(scipy.stats.t.isf(failure_rate / checks / 2, df=n_probes - 1))


class GaussianMixtureOU:
    """Data law Σ_k w_k N(μ_k, σ_k² I) on R^d; exact marginal score and log-density under the OU flow."""

    def __init__(self, d, seed=0):
        g = gen(seed)
        self.space = Euclidean(d, process="ornstein_uhlenbeck")
        self.mu = torch.randn(2, d, dtype=F64, generator=g) * 1.5
        self.var = torch.tensor([0.01, 1.0], dtype=F64)       # a narrow (hard) and a wide (easy) component
        self.logw = torch.log(torch.tensor([0.5, 0.5], dtype=F64))
        self.schedule = TimeSchedule(*self.space.time_range)

    def _parts(self, x, t):
        a2 = torch.exp(-t).reshape(-1, 1)
        m = a2.sqrt().unsqueeze(-1) * self.mu                 # (n, 2, d)
        v = a2 * self.var + 1 - a2                             # (n, 2)
        d = x.shape[-1]
        diff = x.unsqueeze(1) - m
        logn = -0.5 * diff.square().sum(-1) / v - 0.5 * d * torch.log(2 * math.pi * v)
        return logn + self.logw, diff, v

    def log_prob(self, x, t):
        return torch.logsumexp(self._parts(x, torch.as_tensor(t, dtype=F64).expand(x.shape[0]))[0], -1)

    def score(self, x, t):
        logj, diff, v = self._parts(x, t)
        r = torch.softmax(logj, -1)
        return (r.unsqueeze(-1) * (-diff / v.unsqueeze(-1))).sum(1)

    def field(self):
        return ScoreField(self.space, self.schedule, self.score)

    def sample(self, n, seed):
        g = gen(seed)
        k = torch.randint(2, (n,), generator=g)
        return self.mu[k] + self.var[k].sqrt().unsqueeze(-1) * torch.randn(n, self.mu.shape[1], dtype=F64,
                                                                            generator=g)


@pytest.mark.parametrize("step_control", ["point", "batch"])
def test_exact_divergence_matches_the_gaussian_mixture_oracle(step_control):
    # exact divergence (d = 2), rtol 1e-6: tolerance 1e-3 nats, as the heat-kernel oracles of test_likelihood.py
    law = GaussianMixtureOU(2)
    x = law.sample(12, 1)
    out = log_likelihood(law.field(), x, rtol=1e-6, atol=1e-7, step_control=step_control)
    exact = law.log_prob(x, law.schedule.t_min)
    assert out["divergence"] == "exact"
    assert float((out["log_prob"] - exact).abs().max()) < 1e-3, (out["log_prob"], exact)


def test_hutchinson_with_fixed_probes_matches_the_oracle_in_dimension_6():
    # Hutchinson (d = 6 > 3) at the default tolerances: the error to the exact log-likelihood lies within
    # t-threshold × its standard error (16 probes, failure rate 1e-4 over the 10 points) + 1e-3 for the solver
    law = GaussianMixtureOU(6, seed=2)
    x = law.sample(10, 3)
    out = log_likelihood(law.field(), x, n_probes=16, generator=gen(4))
    exact = law.log_prob(x, law.schedule.t_min)
    assert out["divergence"] == "hutchinson"
    err = (out["log_prob"] - exact).abs()
    assert bool((err < t_threshold(1e-4, 16, 10) * out["stderr"] + 1e-3).all()), (err, out["stderr"])
    assert bool((out["stderr"] > 0).all())


def test_simplex_dimension_5_default_log_prob_terminates_and_matches_the_oracle():
    # dim 5: the default settings (dopri5, rtol 1e-5, Hutchinson with 4 probes) on 5 points of a logistic-normal
    # target; the error lies within the t(3) threshold (failure rate 1e-3 over 5 points) × stderr + 1e-3
    s = Simplex(6)
    mu, s2 = torch.tensor([0.5, -1.0, 0.3, 0.0, 0.8], dtype=F64), 0.2
    h = helmert_basis(6)

    def score(x, t):
        a2 = torch.exp(-t)[:, None]
        return (-(ilr(x) - a2.sqrt() * mu) / (a2 * s2 + 1 - a2)) @ h

    schedule = TimeSchedule(*s.time_range)
    x = ilr_inverse(mu + math.sqrt(s2) * torch.randn(5, 5, dtype=F64, generator=gen(5)))
    out = log_likelihood(ScoreField(s, schedule, score), x, generator=gen(6))
    a2 = math.exp(-schedule.t_min)
    v = a2 * s2 + 1 - a2
    ref = (-0.5 * (ilr(x) - math.sqrt(a2) * mu).square().sum(-1) / v - 2.5 * math.log(2 * math.pi * v)
           + s.log_volume_density(x))
    assert out["divergence"] == "hutchinson"
    err = (out["log_prob"] - ref).abs()
    assert bool((err < t_threshold(1e-3, 4, 5) * out["stderr"] + 1e-3).all()), (err, out["stderr"])
    assert int(out["point_steps"].max()) < 200, out["point_steps"]


def test_fitted_simplex_model_default_log_prob_terminates():
    # the case that never finished before fixed probes: a (briefly) fitted K = 6 model, default Model.log_prob
    s = Simplex(6)
    data = ilr_inverse(0.5 * torch.randn(300, 5, dtype=F64, generator=gen(7)))
    model = heatwalk.fit(s, data, steps=30, batch_size=64, seed=0, progress=False, network={"hidden": 32, "depth": 2})
    out = model.log_prob(data[:4])
    assert out["divergence"] == "hutchinson" and bool(torch.isfinite(out["log_prob"]).all())
    assert int(out["point_steps"].max()) < 1000, out["point_steps"]


def test_per_point_control_makes_each_point_independent_of_its_batch():
    # a point's solution depends only on itself: in a batch it equals the point integrated alone (1e-12), and
    # points of the narrow component need more steps than those of the wide one; with one step for the batch
    # every point takes as many steps as the hardest
    law = GaussianMixtureOU(2, seed=8)
    x = law.sample(8, 9)
    together = log_likelihood(law.field(), x)
    alone = [log_likelihood(law.field(), x[i:i + 1]) for i in range(8)]
    torch.testing.assert_close(together["log_prob"], torch.cat([a["log_prob"] for a in alone]), rtol=1e-12, atol=1e-12)
    assert together["point_steps"].tolist() == [int(a["point_steps"][0]) for a in alone]
    steps = together["point_steps"]
    assert int(steps.min()) < int(steps.max()), steps
    batch = log_likelihood(law.field(), x, step_control="batch")
    assert set(batch["point_steps"].tolist()) == {batch["steps"][0]} and batch["steps"][0] >= int(steps.max())


@pytest.mark.parametrize("step_control", ["point", "batch"])
def test_the_cap_counts_attempted_steps(step_control):
    # at rtol = atol = 1e-300 no trial step is ever accepted (each rejection shrinks h 5x; an accepted-steps cap
    # would never be reached): 20 attempts end the run with 0 accepted, and the message names the point and cap
    law = GaussianMixtureOU(2)
    x = law.sample(3, 10)
    with pytest.raises(InputError, match=r"made 20 attempted steps at point 0 \(0 accepted\)") as e:
        log_likelihood(law.field(), x, rtol=1e-300, atol=1e-300, max_steps=20, step_control=step_control)
    assert "max_steps" in str(e.value)


def test_bad_step_control_is_refused():
    law = GaussianMixtureOU(2)
    with pytest.raises(InputError, match="step_control must be one of 'point', 'batch'"):
        log_likelihood(law.field(), law.sample(2, 0), step_control="shared")


@pytest.mark.parametrize("space", [Torus(2), Sphere(2), Sphere(5), SO3(), Simplex(4), Euclidean(3)], ids=repr)
def test_probes_have_identity_covariance_in_the_metric(space):
    # z -> probe_tangent(x, z) is linear; in an orthonormal tangent basis its matrix C (dim x probe size) must
    # satisfy C Cᵀ = I (then E[<z,a><z,b>] = <a,b> for standard normal z: Hutchinson is unbiased); 1e-12
    x = space.prior_sample(5, gen(11))
    k = space.probe_shape[0]
    basis = space.tangent_basis(x)
    for i in range(5):
        xi = x[i:i + 1].expand(k, *space.ambient_shape)
        probes = space.probe_tangent(xi, torch.eye(k, dtype=F64))                # one unit noise vector per row
        C = torch.stack([space.inner(xi, basis[i:i + 1, j].expand_as(probes), probes) for j in range(space.dim)])
        torch.testing.assert_close(C @ C.T, torch.eye(space.dim, dtype=F64), atol=1e-12, rtol=0)


def test_sphere_probes_are_smooth_where_the_tangent_basis_flips():
    # the Householder basis of Sphere.tangent_basis changes sign across x_0 = 0; the probe of a fixed noise
    # vector must not: points 2e-9 apart give probes within 1e-8
    sp = Sphere(4)
    base = torch.tensor([[0.0, 0.6, 0.0, 0.8, 0.0]], dtype=F64)
    plus, minus = sp.project(base + torch.tensor([[1e-9, 0, 0, 0, 0]], dtype=F64)), sp.project(
        base - torch.tensor([[1e-9, 0, 0, 0, 0]], dtype=F64))
    z = torch.randn(1, 5, dtype=F64, generator=gen(12))
    assert float((sp.probe_tangent(plus, z) - sp.probe_tangent(minus, z)).abs().max()) < 1e-8
