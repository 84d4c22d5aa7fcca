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
    """Points of R^d, shape (..., d), in the data's own units; densities w.r.t. Lebesgue measure on R^d.

    The heat flow is scaled to the data: with a location ``loc`` = m and a per-coordinate ``scale`` = s
    (S = diag(s)), every formula below is the standard one in the standardised coordinates
    z = S⁻¹(x - m), i.e. the heat flow of the metric g = S⁻² (generator (1/2) Σ_j s_j² ∂_j²):

    - ``process="brownian"`` (default): x_t | x_0 ~ N(x_0, t S²); the reverse process starts from the prior
      N(m, t_max S²), with t_max fixed when the space is built (default 100). For data whose mean is m and
      standard deviations s the law at t_max is about N(m, (1 + t_max) S²), whose KL divergence to the prior
      is (d/2)(r - 1 - log r) with r = 1 + 1/t_max, i.e. 4.9e-5 d nats at t_max = 100.
    - ``process="ornstein_uhlenbeck"``: dX = -(1/2)(X - m) dt + S dB, x_t | x_0 ~ N(m + e^{-t/2}(x_0 - m),
      (1 - e^{-t}) S²) (:mod:`heatwalk.kernels.ornstein_uhlenbeck` in z), stationary law and prior N(m, S²);
      t_max defaults to 20, where for |z_0| ≤ 20 the law is within KL = e^{-t}|z_0|²/2 ≤ 4e-7 nats of it.

    ``loc`` and ``scale`` (one number per coordinate, or one for all) default to None: ``fit`` then sets
    them to the training data's mean and standard deviation per coordinate (:meth:`fitted_to`), so data in
    any units and at any offset is fitted as well as standardised data (a standard deviation of 0.3 around
    4.5, fitted with m = 0 and s = 1, lost 0.11 nats per point against the exact law). A space built with
    them (``Euclidean(2, loc=0, scale=1)`` is the unscaled process) keeps them. Until they are set, m = 0
    and s = 1.

    Scores are Riemannian gradients (S² ∇_x log p, the standardised score scaled back by S), tangent
    vectors in the data's units; the network's output is read in the orthonormal frame of g (S times the
    standardised scaled score), so it is of order one whatever the units. Log-densities are w.r.t.
    Lebesgue measure in the data's units: the kernel's log-density in z minus Σ_j log s_j
    (:meth:`log_volume_density`).

    Pass a ``time_range`` to ``fit`` only with the same t_max, since
    ``prior_sample`` / ``prior_log_prob`` use the space's.
    """

    kind = "euclidean"
    plot_kind = "coordinates"
    reference_measure = "Lebesgue measure"
    capabilities = frozenset({"coordinates"})

    def __init__(self, d: int = 2, t_max: float | None = None, process: str = "brownian", loc=None, scale=None):
        self.d = check_positive_int("Euclidean: d", d)
        self.process = check_choice("Euclidean: process", process, PROCESSES)
        default = 100.0 if process == "brownian" else 20.0
        self.t_max = check_positive_number("Euclidean: t_max", default if t_max is None else t_max)
        self.dim = d
        self.ambient_shape = (d,)
        self._ou = process == "ornstein_uhlenbeck"
        self.loc = _per_coordinate("loc", loc, self.d, positive=False)
        self.scale = _per_coordinate("scale", scale, self.d, positive=True)
        self._log_scale_sum = 0.0 if self.scale is None else float(sum(math.log(v) for v in self.scale))
        self._tensors: dict = {}      # (dtype, device) -> (m, s), made once each (read-only: never written to)

    def config(self) -> dict:
        out = {"kind": "euclidean", "d": self.d, "t_max": self.t_max, "process": self.process}
        if self.loc is not None:
            out["loc"] = list(self.loc)
        if self.scale is not None:
            out["scale"] = list(self.scale)
        return out

    def __repr__(self) -> str:
        """As the config, with loc and scale to 6 significant digits (the config keeps them exactly)."""
        parts = [f"d={self.d}", f"t_max={self.t_max!r}", f"process={self.process!r}"]
        for name in ("loc", "scale"):
            values = getattr(self, name)
            if values is not None:
                parts.append(f"{name}=[{', '.join(f'{v:.6g}' for v in values)}]")
        return f"Euclidean({', '.join(parts)})"

    def fitted_to(self, x) -> "Euclidean":
        """This space with ``loc`` and ``scale`` set from points x (n, d) where they are unset: the mean and the
        standard deviation (ddof 0) of each coordinate; a coordinate that does not vary gets scale 1."""
        if self.loc is not None and self.scale is not None:
            return self
        x = torch.as_tensor(x, dtype=DTYPE)  # cpu: a few statistics of the training points
        loc = self.loc if self.loc is not None else x.mean(0).tolist()
        sd = x.std(0, correction=0)
        scale = self.scale if self.scale is not None else [v if v > 0 else 1.0 for v in sd.tolist()]
        return Euclidean(self.d, self.t_max, self.process, loc=loc, scale=scale)

    def holds_fit_of(self, fitted) -> bool:
        """Equal, or equal once the location and scale left unset here are taken from ``fitted``."""
        if not isinstance(fitted, Euclidean) or fitted.d != self.d:
            return False
        filled = Euclidean(self.d, self.t_max, self.process, loc=self.loc if self.loc is not None else fitted.loc,
                           scale=self.scale if self.scale is not None else fitted.scale)
        return filled == fitted

    def _m_s(self, x: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        """(m, s) as tensors like x (zeros and ones while unset), made once per dtype and device."""
        key = (x.dtype, x.device)
        if key not in self._tensors:
            m = torch.zeros(self.d, dtype=x.dtype, device=x.device) if self.loc is None else \
                torch.tensor(self.loc, dtype=x.dtype, device=x.device)
            s = torch.ones(self.d, dtype=x.dtype, device=x.device) if self.scale is None else \
                torch.tensor(self.scale, dtype=x.dtype, device=x.device)
            self._tensors[key] = (m, s)
        return self._tensors[key]

    def standardise(self, x: torch.Tensor) -> torch.Tensor:
        """z = S⁻¹(x - m)."""
        m, s = self._m_s(x)
        return (x - m) / s

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

    def inner(self, x, u, v):
        """g(u, v) = Σ_j u_j v_j / s_j²."""
        _, s = self._m_s(u)
        return (u * v / s.square()).sum(-1)

    def dist(self, x, y):
        """Distance of the metric g: |S⁻¹(y - x)| (the Euclidean distance of standardised points)."""
        _, s = self._m_s(x)
        return torch.linalg.vector_norm((y - x) / s, dim=-1)

    def tangent_basis(self, x):
        """The columns of S, orthonormal for g."""
        _, s = self._m_s(x)
        return torch.diag(s).expand(*x.shape[:-1], self.d, self.d)

    def random_tangent(self, x, generator=None):
        _, s = self._m_s(x)
        return s * torch.randn(x.shape, dtype=x.dtype, device=x.device, generator=generator)

    def tangent_from_network(self, x, v):
        """S v: the tangent vector whose coordinates in the orthonormal frame of g are v."""
        _, s = self._m_s(x)
        return s * v

    def gradient_to_tangent(self, x, grad):
        """The Riemannian gradient S² ∇ of a function whose ordinary gradient is ``grad``."""
        _, s = self._m_s(x)
        return s.square() * grad

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
        """E[x_0 | x_t] by Tweedie, with the Riemannian score: x + t score (Brownian) or
        m + e^{t/2} (x - m + (1 - e^{-t}) score) (Ornstein–Uhlenbeck)."""
        t = t.reshape(-1, 1)
        if self._ou:
            m, _ = self._m_s(x)
            return m + torch.exp(0.5 * t) * (x - m - torch.expm1(-t) * score)
        return x + t * score

    def denoised_scale(self, t):
        """Per coordinate j, c_t s_j² with Cov[x_0 | x_t] = ∂E[x_0 | x_t]/∂x_t · diag(c_t s²): c_t = t (Brownian)
        or e^{t/2} (1 - e^{-t}) (OU); shape (n, d)."""
        c = torch.exp(0.5 * t) * -torch.expm1(-t) if self._ou else t
        _, s = self._m_s(c)
        return c.reshape(-1, 1) * s.square()

    # --- features --------------------------------------------------------------------------
    @property
    def embed_dim(self) -> int:
        return self.d

    def embed(self, x):
        """The standardised coordinates z = S⁻¹(x - m)."""
        return self.standardise(x)

    # --- heat flow -------------------------------------------------------------------------
    @property
    def time_range(self) -> tuple[float, float]:
        # t_min = 1e-4: noise standard deviation 0.01 of a unit-variance (standardised) coordinate
        return (1e-4, self.t_max)

    def _sample_forward(self, x0, t, generator=None):
        m, s = self._m_s(x0)
        z0 = (x0 - m) / s
        if self._ou:
            return m + s * ou_sample(z0, t, generator)
        z = torch.randn(x0.shape, dtype=x0.dtype, device=x0.device, generator=generator)
        return x0 + s * t.unsqueeze(-1).sqrt() * z

    def _log_kernel(self, xt, x0, t):
        """log N(z_t; z_0, t I) (Brownian) or the OU kernel in z, in nats w.r.t. the volume of g."""
        zt, z0 = self.standardise(xt), self.standardise(x0)
        if self._ou:
            return ou_log_prob_and_score(zt, z0, t)[0]
        r2 = (zt - z0).square().sum(-1)
        return -0.5 * r2 / t - 0.5 * self.d * (LOG_TWO_PI + torch.log(t))

    def _score(self, xt, x0, t):
        """S times the standardised score: -(x_t - x_0)/t (Brownian)."""
        if self._ou:
            _, s = self._m_s(xt)
            return s * ou_log_prob_and_score(self.standardise(xt), self.standardise(x0), t)[1]
        return -(xt - x0) / t.unsqueeze(-1)

    def drift(self, x, t):
        """0 (Brownian) or -(x - m)/2 (Ornstein–Uhlenbeck)."""
        if not self._ou:
            return torch.zeros_like(x)
        m, _ = self._m_s(x)
        return -0.5 * (x - m)

    def prior_sample(self, n, generator=None):
        z = torch.randn(n, self.d, dtype=DTYPE, device=generator_device(generator), generator=generator)
        m, s = self._m_s(z)
        return m + s * (z if self._ou else math.sqrt(self.t_max) * z)

    def prior_log_prob(self, x):
        """log-density of the prior w.r.t. the volume of g (of N(0, I) or N(0, t_max I) in z)."""
        z = self.standardise(x)
        if self._ou:
            return standard_normal_log_prob(z)
        return -0.5 * z.square().sum(-1) / self.t_max - 0.5 * self.d * (LOG_TWO_PI + math.log(self.t_max))

    def log_volume_density(self, x):
        """log d(volume of g)/d(Lebesgue) = -Σ_j log s_j."""
        batch = x.shape[:-1]
        return torch.full(batch, -self._log_scale_sum, dtype=DTYPE, device=x.device)


def _per_coordinate(name: str, value, d: int, *, positive: bool):
    """None, or a tuple of d finite floats (one number is repeated); scale must be > 0."""
    if value is None:
        return None
    values = torch.as_tensor(value, dtype=DTYPE).reshape(-1).tolist()  # cpu: a few numbers
    if len(values) == 1:
        values = values * d
    if len(values) != d:
        raise InputError(f"Euclidean: {name} has {len(values)} values for d = {d} coordinates; give one or {d}",
                         field=name)
    for j, v in enumerate(values):
        if not math.isfinite(v) or (positive and not v > 0):
            raise InputError(f"Euclidean: {name}[{j}] = {v!r}; expected a finite number"
                             + (" > 0" if positive else ""), field=name)
    return tuple(float(v) for v in values)
