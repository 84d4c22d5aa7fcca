"""Flat Euclidean space R^d: the baseline diffusion on embedding coordinates.

Used by ``benchmarks/fit_quality.py`` to fit a plain Euclidean diffusion to the
embedding coordinates of data that lives on a manifold (the samples are then
mapped back to the manifold by the caller). It follows the same Space protocol,
so it goes through the same ``heatwalk.fit`` loop and samplers as every other
space.
"""

from __future__ import annotations

import math

import torch

from heatwalk.checks import check_positive_int, check_positive_number
from heatwalk.errors import InputError
from heatwalk.spaces.base import DTYPE, as_points
from heatwalk.spaces.manifold import Manifold

LOG_TWO_PI = math.log(2.0 * math.pi)


class Euclidean(Manifold):
    """Points of R^d, shape (..., d); flat metric, densities w.r.t. Lebesgue measure on R^d.

    Forward process: Brownian motion with generator (1/2)Δ, x_t | x_0 ~ N(x_0, t I_d).
    The space is not compact: the reverse process starts from the prior
    N(0, t_max I_d), with t_max fixed when the space is built (default 100).
    For data standardised by the caller (mean 0, unit variance per
    coordinate) the law at t_max is about N(0, (1 + t_max) I), whose KL
    divergence to the prior is (d/2)(r - 1 - log r) with r = 1 + 1/t_max,
    i.e. 4.9e-5 d nats at t_max = 100. Pass a ``time_range`` to ``fit`` only
    with the same t_max, since ``prior_sample`` / ``prior_log_prob`` use the
    space's.
    """

    kind = "euclidean"

    def __init__(self, d: int = 2, t_max: float = 100.0):
        self.d = check_positive_int("Euclidean: d", d)
        self.t_max = check_positive_number("Euclidean: t_max", t_max)
        self.dim = d
        self.ambient_shape = (d,)

    def config(self) -> dict:
        return {"kind": "euclidean", "d": self.d, "t_max": self.t_max}

    @classmethod
    def from_table(cls, n_columns: int, **options) -> "Euclidean":
        """One coordinate per column."""
        cls.check_file_options(options)
        return cls(n_columns)

    # --- geometry --------------------------------------------------------------------------
    def validate(self, x) -> torch.Tensor:
        """Finite float64 points of shape (n, d); raises :class:`InputError` naming the first bad row."""
        return as_points(x, self.ambient_shape, "points of R^d")

    def project(self, x):
        return x

    def to_tangent(self, x, v):
        return v

    def exp(self, x, v):
        return x + v

    def log(self, x, y):
        return y - x

    def dist(self, x, y):
        return torch.linalg.vector_norm(y - x, dim=-1)

    def tangent_basis(self, x):
        eye = torch.eye(self.d, dtype=x.dtype, device=x.device)
        return eye.expand(*x.shape[:-1], self.d, self.d)

    def random_tangent(self, x, generator=None):
        return torch.randn(x.shape, dtype=x.dtype, device=x.device, generator=generator)

    def random_uniform(self, n, generator=None):
        raise InputError(f"{self!r} is not compact: there is no uniform law on R^d; prior_sample draws from "
                         f"N(0, t_max I)")

    @property
    def log_volume(self) -> float:
        return math.inf

    # --- features --------------------------------------------------------------------------
    @property
    def embed_dim(self) -> int:
        return self.d

    def embed(self, x):
        return x

    # --- heat flow -------------------------------------------------------------------------
    @property
    def time_range(self) -> tuple[float, float]:
        # t_min = 1e-4: noise standard deviation 0.01 of a unit-variance (standardised) coordinate
        return (1e-4, self.t_max)

    def _sample_forward(self, x0, t, generator=None):
        t = t.unsqueeze(-1)
        z = torch.randn(x0.shape, dtype=x0.dtype, device=x0.device, generator=generator)
        return x0 + t.sqrt() * z

    def _log_kernel(self, xt, x0, t):
        """log N(xt; x0, t I) in nats, w.r.t. Lebesgue measure."""
        r2 = (xt - x0).square().sum(-1)
        return -0.5 * r2 / t - 0.5 * self.d * (LOG_TWO_PI + torch.log(t))

    def _score(self, xt, x0, t):
        t = t.unsqueeze(-1)
        return -(xt - x0) / t

    def prior_sample(self, n, generator=None):
        return math.sqrt(self.t_max) * torch.randn(n, self.d, dtype=DTYPE, generator=generator)

    def prior_log_prob(self, x):
        return -0.5 * x.square().sum(-1) / self.t_max - 0.5 * self.d * (LOG_TWO_PI + math.log(self.t_max))
