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


@pytest.fixture
def figures(monkeypatch):
    """The matplotlib Figures a command saves through ``heatwalk.frontend.plots.save_figure``, in order."""
    import heatwalk.frontend.plots as plots

    caught = []
    original = plots.save_figure

    def keep(fig, path, **kw):
        caught.append(fig)
        return original(fig, path, **kw)

    monkeypatch.setattr(plots, "save_figure", keep)
    return caught
