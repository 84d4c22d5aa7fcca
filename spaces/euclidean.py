"""Flat Euclidean space R^d, with a Brownian or an Ornstein–Uhlenbeck forward process.

Two uses: positions and other unbounded coordinates (alone, or as a factor of
a :class:`~heatwalk.spaces.Product`, e.g. the translation of a rigid-body frame
beside its SO(3) orientation), and the baseline of ``benchmarks/fit_quality.py``,
a plain Euclidean diffusion on the embedding coordinates of data that lives on
a manifold (the samples are then mapped back by the caller).
"""

from __future__ import annotations

import math

import torch

from heatwalk.checks import check_choice, check_positive_int, check_positive_number
from heatwalk.errors import InputError
from heatwalk.kernels.ornstein_uhlenbeck import ou_log_prob_and_score, ou_sample, standard_normal_log_prob
from heatwalk.spaces.base import DTYPE, as_points, generator_device
from heatwalk.spaces.manifold import Manifold

LOG_TWO_PI = math.log(2.0 * math.pi)
PROCESSES = ("brownian", "ornstein_uhlenbeck")


class Euclidean(Manifold):
    """Points of R^d, shape (..., d); flat metric, densities w.r.t. Lebesgue measure on R^d.

    ``process="brownian"`` (default): Brownian motion with generator (1/2)Δ,
    x_t | x_0 ~ N(x_0, t I_d). The space is not compact: the reverse process
    starts from the prior N(0, t_max I_d), with t_max fixed when the space is
    built (default 100). For data standardised by the caller (mean 0, unit
    variance per coordinate) the law at t_max is about N(0, (1 + t_max) I),
    whose KL divergence to the prior is (d/2)(r - 1 - log r) with
    r = 1 + 1/t_max, i.e. 4.9e-5 d nats at t_max = 100.

    ``process="ornstein_uhlenbeck"``: dX = -(1/2) X dt + dB (the same generator
    plus the confining drift -x/2), x_t | x_0 ~ N(e^{-t/2} x_0, (1 - e^{-t}) I_d)
    (:mod:`heatwalk.kernels.ornstein_uhlenbeck`), stationary law and prior the
    standard normal N(0, I_d); t_max defaults to 20, where for |x_0| ≤ 20 the law
    is within KL = e^{-t}|x_0|²/2 ≤ 4e-7 nats of the prior. Suited to data of
    order-one scale (standardise positions first).

    Pass a ``time_range`` to ``fit`` only with the same t_max, since
    ``prior_sample`` / ``prior_log_prob`` use the space's.
    """

    kind = "euclidean"
    plot_kind = "coordinates"
    reference_measure = "Lebesgue measure"
    capabilities = frozenset({"coordinates"})

    def __init__(self, d: int = 2, t_max: float | None = None, process: str = "brownian"):
        self.d = check_positive_int("Euclidean: d", d)
        self.process = check_choice("Euclidean: process", process, PROCESSES)
        default = 100.0 if process == "brownian" else 20.0
        self.t_max = check_positive_number("Euclidean: t_max", default if t_max is None else t_max)
        self.dim = d
        self.ambient_shape = (d,)
        self._ou = process == "ornstein_uhlenbeck"

    def config(self) -> dict:
        return {"kind": "euclidean", "d": self.d, "t_max": self.t_max, "process": self.process}

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
                         f"the prior instead")

    @property
    def log_volume(self) -> float:
        return math.inf

    # --- fixed coordinates -----------------------------------------------------------------
    def given_part(self, given: dict, n: int):
        """``given={coordinate index: value}``: one value or one per sample, finite."""
        def convert(index, v):
            if not bool(torch.isfinite(v).all()):
                raise InputError(f"given: coordinate {index} has a value that is NaN or infinite", field="given")
            return v

        return self._coordinate_given(given, n, "coordinate", convert)

    def denoised_mean(self, x, score, t):
        """E[x_0 | x_t] by Tweedie: x + t s (Brownian) or e^{t/2} (x + (1 - e^{-t}) s) (Ornstein–Uhlenbeck)."""
        t = t.reshape(-1, 1)
        if self._ou:
            return torch.exp(0.5 * t) * (x - torch.expm1(-t) * score)
        return x + t * score

    def denoised_scale(self, t):
        """c_t with Cov[x_0 | x_t] = c_t ∂E[x_0 | x_t]/∂x_t: t (Brownian) or e^{t/2} (1 - e^{-t}) (OU)."""
        return torch.exp(0.5 * t) * -torch.expm1(-t) if self._ou else t

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
        if self._ou:
            return ou_sample(x0, t, generator)
        t = t.unsqueeze(-1)
        z = torch.randn(x0.shape, dtype=x0.dtype, device=x0.device, generator=generator)
        return x0 + t.sqrt() * z

    def _log_kernel(self, xt, x0, t):
        """log N(xt; x0, t I) (Brownian) or the OU kernel, in nats, w.r.t. Lebesgue measure."""
        if self._ou:
            return ou_log_prob_and_score(xt, x0, t)[0]
        r2 = (xt - x0).square().sum(-1)
        return -0.5 * r2 / t - 0.5 * self.d * (LOG_TWO_PI + torch.log(t))

    def _score(self, xt, x0, t):
        if self._ou:
            return ou_log_prob_and_score(xt, x0, t)[1]
        t = t.unsqueeze(-1)
        return -(xt - x0) / t

    def drift(self, x, t):
        """0 (Brownian) or -x/2 (Ornstein–Uhlenbeck)."""
        return -0.5 * x if self._ou else torch.zeros_like(x)

    def prior_sample(self, n, generator=None):
        scale = 1.0 if self._ou else math.sqrt(self.t_max)
        return scale * torch.randn(n, self.d, dtype=DTYPE, device=generator_device(generator), generator=generator)

    def prior_log_prob(self, x):
        if self._ou:
            return standard_normal_log_prob(x)
        return -0.5 * x.square().sum(-1) / self.t_max - 0.5 * self.d * (LOG_TWO_PI + math.log(self.t_max))
