"""Every continuous space passes the shared contract of tests/contract.py.

To add a space: append a factory to SPACES.
"""

import pytest

from contract import ALL_CHECKS
from heatwalk.spaces import Sphere, Torus
from heatwalk.spaces import SO3

SPACES = {
    "torus1": lambda: Torus(1),
    "torus3": lambda: Torus(3),
    "sphere1": lambda: Sphere(1),
    "sphere2": lambda: Sphere(2),
    "sphere3": lambda: Sphere(3),
    "so3": SO3,
}


@pytest.mark.parametrize("check", ALL_CHECKS, ids=lambda c: c.__name__.removeprefix("check_"))
@pytest.mark.parametrize("name", sorted(SPACES))
def test_contract(name, check):
    check(SPACES[name]())
