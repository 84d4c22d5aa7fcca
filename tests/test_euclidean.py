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
