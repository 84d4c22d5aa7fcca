"""Rules that choose training settings from the data: its number of points n and its dimension d.

They read nothing but n and d (never the data's values or a benchmark), so they apply to data not
seen when they were written.

- ``fourier_scale(n, d) = n^(1/(d+4))``: the standard deviation of the frequencies of random Fourier
  features, in inverse embedding units. n^(-1/(d+4)) is the rate of the asymptotically optimal
  kernel-density bandwidth for n points in d dimensions (Silverman 1986, *Density Estimation*,
  eq. 4.14, for a unit-scale law); embeddings of heatwalk's spaces have coordinates of order 1, so
  frequencies of that inverse length resolve the finest structure that n points can support.
- ``size_rule(n, d)``: training steps and network width from n. Steps grow as the square root of the
  data size, ``3000 · clip(sqrt(n / 4000), 1, 4)`` rounded to hundreds (3,000 steps up to 4,000
  points, 12,000 from 64,000), so larger data get more passes before the fit is stopped, but a run
  never costs more than 4x the fixed default; width 256 below 8,000 points and 512 from there (depth
  3), as a larger data set supports more parameters before it is over-fitted.
"""

from __future__ import annotations

import math

from heatwalk.errors import InputError

#: steps of the fixed default, and the size rule's range of multiples of it
BASE_STEPS = 3000
STEP_FACTOR_RANGE = (1.0, 4.0)
#: data size at which the size rule starts to add steps, and where it widens the network
STEP_SCALE_POINTS = 4000
WIDE_FROM_POINTS = 8000


def _need_size(n, what):
    if n is None:
        raise InputError(f"{what} is chosen from the number of data points, which an iterable of batches does not "
                         f"tell; give it explicitly", field="data")
    return int(n)


def fourier_scale(n: int | None, dim: int) -> float:
    """n^(1/(dim+4)) (module docstring)."""
    n = _need_size(n, "fourier_scale")
    return float(n) ** (1.0 / (dim + 4))


def size_rule(n: int | None, dim: int) -> dict:
    """{"steps": ..., "network": {"hidden": ..., "depth": 3}} for n points of dimension dim (module docstring)."""
    n = _need_size(n, "the size rule's steps and width")
    lo, hi = STEP_FACTOR_RANGE
    factor = min(max(math.sqrt(n / STEP_SCALE_POINTS), lo), hi)
    return {"steps": int(round(BASE_STEPS * factor / 100.0)) * 100,
            "network": {"hidden": 512 if n >= WIDE_FROM_POINTS else 256, "depth": 3}}


def resolve_network(network: dict | None, n: int | None, dim: int) -> dict | None:
    """The network options with ``fourier_scale`` filled in by the rule when Fourier features are asked for."""
    if not network or not network.get("fourier_features") or "fourier_scale" in network:
        return network
    return {**network, "fourier_scale": fourier_scale(n, dim)}
