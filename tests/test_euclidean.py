"""The Euclidean baseline space R^d passes the shared contract, with its prior checked for standardised data."""

import math

import numpy as np

import pytest
import scipy.stats
import torch

from contract import ALL_CHECKS, check_prior_at_large_time
from heatwalk.spaces import Euclidean, from_config

# The shared check_prior_at_large_time starts x0 at prior draws (spread sqrt(t_max)); R^d's prior
# N(0, t_max I) only approximates the law at t_max for standardised data, checked separately below.
CHECKS = [c for c in ALL_CHECKS if c is not check_prior_at_large_time]


@pytest.mark.parametrize("check", CHECKS, ids=lambda c: c.__name__.removeprefix("check_"))
def test_contract(check):
    check(Euclidean(3, t_max=4.0))


def test_kernel_is_scipy_normal_and_prior_fits_standardised_data():
    # Reference: scipy.stats.multivariate_normal (tolerance 1e-12 nats, float64 rounding of O(10) values).
    space = Euclidean(3)
    g = torch.Generator().manual_seed(0)
    x0, xt = torch.randn(5, 3, dtype=torch.float64, generator=g), torch.randn(5, 3, dtype=torch.float64, generator=g)
    ref = [scipy.stats.multivariate_normal(x0[i].numpy(), 0.7 * np.eye(3)).logpdf(xt[i].numpy())
           for i in range(5)]
    torch.testing.assert_close(space.log_kernel(xt, x0, 0.7), torch.tensor(ref, dtype=torch.float64),
                               atol=1e-12, rtol=0)
    # For |x0| <= 1 (standardised data) log p_{t_max}(x | x0) - log prior(x) = O(|x|·|x0| / t_max + d / (2 t_max)):
    # at t_max = 100 and |x| ~ 10 that is below 0.1 + 0.015; checked with tolerance 0.2 nats.
    x0 = torch.randn(8, 3, dtype=torch.float64, generator=g)
    x0 = x0 / torch.linalg.vector_norm(x0, dim=-1, keepdim=True)
    x = space.prior_sample(8, g)
    diff = space.log_kernel(x, x0, space.time_range[1]) - space.prior_log_prob(x)
    assert float(diff.abs().max()) < 0.2, diff


def test_config_roundtrip_and_errors():
    space = Euclidean(4, t_max=50.0)
    assert from_config(space.config()) == space
    with pytest.raises(ValueError, match="d must be"):
        Euclidean(0)
    with pytest.raises(ValueError, match="row 1"):
        space.validate([[0.0] * 4, [math.nan] * 4])
    with pytest.raises(ValueError, match="not compact"):
        space.random_uniform(3)


# ----- the heat flow scaled to the data: loc m and scale s per coordinate ------------------------------------
SCALED = dict(loc=[1.0, -2.0, 0.5], scale=[0.5, 3.0, 1.2])


@pytest.mark.parametrize("process", ["brownian", "ornstein_uhlenbeck"])
@pytest.mark.parametrize("check", CHECKS, ids=lambda c: c.__name__.removeprefix("check_"))
def test_contract_of_the_scaled_flow(check, process):
    check(Euclidean(3, t_max=4.0, process=process, **SCALED))


@pytest.mark.parametrize("process", ["brownian", "ornstein_uhlenbeck"])
def test_scaled_kernel_prior_and_score_are_the_gaussians_of_the_data_units(process):
    """Reference: scipy.stats.multivariate_normal with covariance t S² (Brownian) or the OU law
    N(m + e^{-t/2}(x0 - m), (1 - e^{-t}) S²), prior N(m, t_max S²) or N(m, S²), densities w.r.t. Lebesgue in the
    data's units (log_kernel + log_volume_density); the score is S² ∇ log N = -S² Σ⁻¹ (x - mean) (the Gaussian's
    gradient, a textbook formula). Tolerance 1e-11 nats / relative 1e-10 (float64 rounding)."""
    space = Euclidean(3, process=process, **SCALED)
    m, s = np.array(SCALED["loc"]), np.array(SCALED["scale"])
    g = torch.Generator().manual_seed(3)
    x0 = torch.tensor(m) + torch.tensor(s) * torch.randn(4, 3, dtype=torch.float64, generator=g)
    xt = torch.tensor(m) + 2 * torch.tensor(s) * torch.randn(4, 3, dtype=torch.float64, generator=g)
    t = 0.7
    if process == "brownian":
        means, cov = x0.numpy(), t * np.diag(s ** 2)
        prior = scipy.stats.multivariate_normal(m, space.t_max * np.diag(s ** 2))
    else:
        means, cov = m + math.exp(-t / 2) * (x0.numpy() - m), -math.expm1(-t) * np.diag(s ** 2)
        prior = scipy.stats.multivariate_normal(m, np.diag(s ** 2))
    ref = [scipy.stats.multivariate_normal(means[i], cov).logpdf(xt[i].numpy()) for i in range(4)]
    lp, score = space.log_kernel_and_score(xt, x0, torch.full((4,), t, dtype=torch.float64))
    np.testing.assert_allclose((lp + space.log_volume_density(xt)).numpy(), ref, atol=1e-11, rtol=0)
    gradient = -(xt.numpy() - means) @ np.linalg.inv(cov)
    np.testing.assert_allclose(score.numpy(), gradient * s ** 2, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose((space.prior_log_prob(xt) + space.log_volume_density(xt)).numpy(),
                               prior.logpdf(xt.numpy()), atol=1e-11, rtol=0)
    # the metric g = S⁻²: the tangent basis S is orthonormal, and the network's output is read in it
    basis = space.tangent_basis(xt[:1])[0]
    gram = torch.stack([torch.stack([space.inner(xt[:1], a, b) for b in basis]) for a in basis]).squeeze(-1)
    torch.testing.assert_close(gram, torch.eye(3, dtype=torch.float64), atol=1e-14, rtol=0)
    torch.testing.assert_close(space.tangent_from_network(xt, torch.ones_like(xt)), torch.tensor(s).expand(4, 3))


def test_fit_sets_the_location_and_scale_from_the_data_and_config_keeps_them():
    x = torch.tensor([[4.0, 10.0, 7.0], [5.0, 30.0, 7.0], [6.0, 20.0, 7.0]], dtype=torch.float64)
    fitted = Euclidean(3).fitted_to(x)
    # numpy's mean and population standard deviation; a constant coordinate gets scale 1
    np.testing.assert_allclose(fitted.loc, x.numpy().mean(0), rtol=1e-15)
    np.testing.assert_allclose(fitted.scale, [np.std([4, 5, 6]), np.std([10, 30, 20]), 1.0], rtol=1e-15)
    assert from_config(fitted.config()) == fitted and "scale=" in repr(fitted)
    given = Euclidean(3, loc=0.0, scale=1.0)
    assert given.fitted_to(x) is given and given.loc == (0.0,) * 3
    with pytest.raises(ValueError, match=r"scale\[1\] = -1.0; expected a finite number > 0"):
        Euclidean(2, scale=[1.0, -1.0])
    with pytest.raises(ValueError, match="loc has 3 values for d = 2"):
        Euclidean(2, loc=[0.0, 1.0, 2.0])


def test_data_in_its_own_units_is_fitted_like_standardised_data():
    """Held-out NLL of a fit to N(4.5, 0.3²) against scipy.stats.norm's exact log-density: within 0.03 nats
    (the unscaled flow, m = 0 and s = 1, was 0.11 nats off at 2,000 steps; measured 2026-12-03). The bound is
    loose for 1,200 steps, common practice for a fit check, not a published figure."""
    import heatwalk

    rng = np.random.default_rng(0)
    x, y = rng.normal(4.5, 0.3, (4000, 1)), rng.normal(4.5, 0.3, (1000, 1))
    model = heatwalk.fit(Euclidean(1), torch.as_tensor(x), steps=1200, progress=False)
    assert model.space.loc[0] == pytest.approx(x.mean(), rel=1e-12) and model.space.scale[0] == pytest.approx(x.std())
    nll = -float(model.log_prob(torch.as_tensor(y))["log_prob"].mean())
    exact = -float(scipy.stats.norm(4.5, 0.3).logpdf(y[:, 0]).mean())
    assert abs(nll - exact) < 0.03, (nll, exact)


def test_a_model_fitted_on_r_d_is_drawn_with_the_space_it_was_given():
    """fit fills in loc and scale; the space the user built still holds the model (pictures accept it), a space
    with other settings does not."""
    fitted = Euclidean(2).fitted_to(torch.tensor([[1.0, 2.0], [3.0, 6.0]], dtype=torch.float64))
    assert Euclidean(2).holds_fit_of(fitted) and fitted.holds_fit_of(fitted)
    assert Euclidean(2, loc=[2.0, 4.0]).holds_fit_of(fitted)
    assert not Euclidean(2, loc=0.0).holds_fit_of(fitted) and not Euclidean(2, t_max=5.0).holds_fit_of(fitted)
    assert not Euclidean(3).holds_fit_of(fitted)
