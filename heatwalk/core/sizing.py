"""Rules that choose training settings from the data: its number of points n and its dimension d.

They read nothing but n and d (never the data's values or a benchmark), so they apply to data not
seen when they were written.

- ``fourier_scale(n, d, spread) = n^(1/(d+4)) / spread``: the standard deviation of the frequencies of random
  Fourier features, in inverse embedding units. spread · n^(-1/(d+4)) is Silverman's rule-of-thumb rate of the
  kernel-density bandwidth for n points in d dimensions whose coordinates have standard deviation spread
  (Silverman 1986, *Density Estimation*, eq. 3.28 and 4.14, without the constant factor of order 1), so the
  features resolve the finest structure that n points of that spread can support. spread is measured on the
  data's embedding: the root mean of the per-coordinate variances of ``space.embed(x)``.
- ``size_rule(n, d, bounded)``: training steps and network from n. Steps grow as the square root of the data
  size, ``3000 · clip(sqrt(n / 1000), 1, 6)`` rounded to hundreds (3,000 steps up to 1,000 points, 6,000 at
  4,000, 12,200 at 16,500, 18,000 from 36,000), so larger data get more passes before the fit is stopped, but
  a run never costs more than 6x the fixed default. The network (of score matching and of products; sequence
  models keep their transformer) is the residual one with the time in every block
  (:class:`heatwalk.core.networks.residual.ResidualDenoiser`), 3 blocks of width 128 below 8,000 points and
  256 from there (a larger data set supports more parameters before it is over-fitted; each residual
  width costs about what an MLP of twice the width costs, 9 w² weights against 8 w²). Where the space's
  embedding is not bounded (``bounded`` is ``Space.bounded_embedding``, true on the torus, sphere and SO(3);
  false on R^d and the simplex's clr features) it also has its ``time_skip``, a linear map of the features
  whose matrix is a function of the time.

  Why the skip where the features are unbounded (measured 2026-12-02/03): the blocks' LayerNorms keep their
  input's direction and drop its length, and the last one bounds the output, while far from the data the
  score grows linearly in the point with a slope set by the noise level. Fitted (1,500 steps) to the
  linear-Gaussian law on R² of tests/test_conditioning.py under the Ornstein–Uhlenbeck process, the residual
  network without the skip sampled with standard deviations 25 and 48 (the law's: 1.0 and 1.12) and its
  reconstruction guidance diverged; with it, 0.96 and 1.07, conditional mean and standard deviation 1.03 and
  0.49 (exact: 1 and 0.5; the MLP's 0.94 and 0.55), held-out log-likelihood −2.096 (exact law −2.099, MLP
  −2.120). A time-independent linear skip was not enough (1.2 and 12.8). On the simplex of
  benchmarks/real_data.py it improved the held-out NLL against the MLP by 0.445 ± 0.071 nats. On the torus,
  where the features are bounded, the skip changed the NLL by +0.003 ± 0.002 (not better), so it is left out
  there. The blocks without their LayerNorms (a code variant) changed the NLL against the rule with them by
  +0.003 ± 0.002 (T²), −0.058 ± 0.004 (S²), +0.007 ± 0.002 (SO(3)) and their reconstruction guidance diverged
  on R²: not adopted.
"""

from __future__ import annotations

import math

from heatwalk.errors import InputError

#: steps of the fixed default, and the size rule's range of multiples of it
BASE_STEPS = 3000
STEP_FACTOR_RANGE = (1.0, 6.0)
#: data size at which the size rule starts to add steps, and where it widens the network
STEP_SCALE_POINTS = 1000
WIDE_FROM_POINTS = 8000
#: the rule's widths below and from WIDE_FROM_POINTS (residual network), and its depth
RESIDUAL_WIDTHS = (128, 256)
DEPTH = 3


def _need_size(n, what):
    if n is None:
        raise InputError(f"{what} is chosen from the number of data points, which an iterable of batches does not "
                         f"tell; give it explicitly", field="data")
    return int(n)


def fourier_scale(n: int | None, dim: int, spread: float = 1.0) -> float:
    """n^(1/(dim+4)) / spread (module docstring)."""
    n = _need_size(n, "fourier_scale")
    if not spread > 0:
        raise InputError(f"fourier_scale: the data's embedding has no spread ({spread}); give fourier_scale "
                         f"explicitly", field="network")
    return float(n) ** (1.0 / (dim + 4)) / float(spread)


def embedding_spread(space, points) -> float:
    """Root mean of the per-coordinate variances of ``space.embed(points)``."""
    e = space.embed(points).double()
    return float(e.var(dim=0).mean().sqrt())


def size_rule(n: int | None, dim: int, bounded: bool = False) -> dict:
    """{"steps": ..., "network": {"residual": True, "time_skip": not bounded, "hidden": ..., "depth": 3}} for n
    points of dimension dim on a space whose embedding is ``bounded`` or not (module docstring)."""
    n = _need_size(n, "the size rule's steps and width")
    lo, hi = STEP_FACTOR_RANGE
    factor = min(max(math.sqrt(n / STEP_SCALE_POINTS), lo), hi)
    return {"steps": int(round(BASE_STEPS * factor / 100.0)) * 100,
            "network": {"residual": True, "time_skip": not bounded,
                        "hidden": RESIDUAL_WIDTHS[n >= WIDE_FROM_POINTS], "depth": DEPTH}}


def resolve_network(network: dict | None, n: int | None, dim: int, spread=None) -> dict | None:
    """The network options with ``fourier_scale`` filled in by the rule when Fourier features are asked for;
    ``spread``: a function returning the data's embedding spread (called only then)."""
    if not network or not network.get("fourier_features") or "fourier_scale" in network:
        return network
    return {**network, "fourier_scale": fourier_scale(n, dim, spread() if spread is not None else 1.0)}
