"""Every space passes the shared contract of tests/contract.py.

To add a space: append a factory to SPACES (a manifold) or FINITE_SPACES (a finite state space).
"""

import pytest

from contract import ALL_CHECKS, FINITE_CHECKS
from heatwalk.spaces import SO3, Categories, Euclidean, Simplex, Sphere, Torus

SPACES = {
    "torus1": lambda: Torus(1),
    "torus3": lambda: Torus(3),
    "sphere1": lambda: Sphere(1),
    "sphere2": lambda: Sphere(2),
    "sphere3": lambda: Sphere(3),
    "so3": SO3,
    "simplex3": lambda: Simplex(3),
    "simplex20": lambda: Simplex(20),
}

FINITE_SPACES = {
    "categories_absorbing": lambda: Categories(4, 5, process="absorbing"),
    "categories_uniform": lambda: Categories(3, 2, process="uniform"),
    "categories_rates": lambda: Categories(3, 4, rates=[[-1.0, 0.6, 0.4], [0.2, -0.5, 0.3], [0.5, 0.5, -1.0]]),
}

# Per-space keyword arguments of individual checks (space name -> check name -> kwargs).
CHECK_OPTIONS = {
    # 19 dimensions: importance weights p_t / prior have E[w²] ≈ (1/(v sqrt(2 - v)))^19 with v = 1 - e^{-t}
    # (≈ 6e5 at t = 0.5, ≈ 5 at t = 2), so the prior is a usable proposal only from t ≈ 2 on; the simplex
    # kernel at small t is checked against scipy's multivariate normal and by quadrature in tests/test_simplex.py.
    "simplex20": {"check_kernel_normalised_and_sampler_exact": {"times": (2.0, 5.0)}},
}


@pytest.mark.parametrize("check", ALL_CHECKS, ids=lambda c: c.__name__.removeprefix("check_"))
@pytest.mark.parametrize("name", sorted(SPACES))
def test_contract(name, check):
    check(SPACES[name](), **CHECK_OPTIONS.get(name, {}).get(check.__name__, {}))


@pytest.mark.parametrize("check", FINITE_CHECKS, ids=lambda c: c.__name__.removeprefix("check_"))
@pytest.mark.parametrize("name", sorted(FINITE_SPACES))
def test_finite_contract(name, check):
    check(FINITE_SPACES[name]())


@pytest.mark.parametrize("check", FINITE_CHECKS, ids=lambda c: c.__name__.removeprefix("check_"))
def test_euclidean_contract(check):
    check(Euclidean(2))
