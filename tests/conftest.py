import os
import sys

import torch

sys.path.insert(0, os.path.dirname(__file__))

# The suite is dominated by many small tensor operations, for which one thread is
# faster and far more predictable than two on a 2-core machine (common practice).
torch.set_num_threads(1)


import mpmath
import pytest


@pytest.fixture(autouse=True)
def _mpmath_precision():
    """Every test starts at 50 significant digits of mpmath, whatever another module set globally."""
    mpmath.mp.dps = 50
    yield
    mpmath.mp.dps = 50
