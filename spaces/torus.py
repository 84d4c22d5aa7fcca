"""The flat torus T^n = (R / 2πZ)^n of n angles."""

from __future__ import annotations

import math

import torch

from heatwalk.checks import check_positive_int
from heatwalk.errors import InputError
from heatwalk.kernels.wrapped_normal import LOG_TWO_PI, TWO_PI, wrap_angle, wrapped_normal_log_prob_and_score
from heatwalk.spaces.base import DTYPE, Option, as_points, first_bad_row, generator_device
from heatwalk.spaces.manifold import Manifold

#: inputs of larger magnitude than this (radians) are taken to be in the wrong unit
ANGLE_LIMIT_RADIANS = 2 * math.pi


class Torus(Manifold):
    """n angles in radians, stored wrapped to [-π, π); shape (..., n).

    Metric: flat, each angle measured by arc length, so the total volume is
    (2π)^n. Forward process: independent Brownian motions with generator
    (1/2)Δ, i.e. each angle's kernel is the wrapped normal with variance t
    (see :mod:`heatwalk.kernels.wrapped_normal`). The prior is uniform.

    ``validate`` accepts finite angles in [-2π, 2π] (so both [-π, π) and
    [0, 2π) data load) and wraps them; anything further out is rejected as
    probably being in the wrong unit.
    """

    kind = "torus"
    bounded_embedding = True
    file_options = (Option("degrees", bool, "angles are in degrees (default: radians)"),)
    capabilities = frozenset({"angles", "coordinates"})
    plot_kind = "angles"
    reference_measure = "arc length in each angle (radians; total volume (2π)^n)"

    def __init__(self, n: int = 1):
        self.n = check_positive_int("Torus: n", n)
        self.dim = n
        self.ambient_shape = (n,)

    def config(self) -> dict:
        return {"kind": "torus", "n": self.n}

    # --- file rows -------------------------------------------------------------------------
    @classmethod
    def from_table(cls, n_columns: int, **options) -> "Torus":
        """One angle per column."""
        cls.check_file_options(options)
        return cls(n_columns)

    def from_rows(self, rows, *, degrees: bool = False) -> torch.Tensor:
        """Rows of n angles; ``degrees=True`` reads degrees instead of radians."""
        x = as_points(rows, self.ambient_shape, "angles")
        unit, limit = ("degrees", math.degrees(ANGLE_LIMIT_RADIANS)) if degrees else ("radians", ANGLE_LIMIT_RADIANS)
        far = (x.abs() > limit * (1 + 1e-12)).any(dim=1)
        i = first_bad_row(far)
        if i is not None:
            j = int((x[i].abs() > limit * (1 + 1e-12)).nonzero()[0, 0])
            raise InputError(
                f"row {i}, column {j}: angle {float(x[i, j]):g} is outside [-{limit:g}, {limit:g}] {unit}"
                + ("" if degrees else " (were the angles given in degrees? read them with the reading option degrees=True)"),
                row=i, field=str(j),
            )
        if degrees:
            x = torch.deg2rad(x)
        return self.validate(x)

    def to_rows(self, x: torch.Tensor, *, degrees: bool = False) -> torch.Tensor:
        return torch.rad2deg(x) if degrees else x

    def column_names(self, *, degrees: bool = False) -> list[str]:
        return [f"angle{i}" for i in range(self.n)]

    # --- geometry --------------------------------------------------------------------------
    def validate(self, x) -> torch.Tensor:
        x = as_points(x, self.ambient_shape, "angles")
        far = (x.abs() > ANGLE_LIMIT_RADIANS * (1 + 1e-12)).any(dim=1)
        i = first_bad_row(far)
        if i is not None:
            raise InputError(
                f"row {i}: angles {x[i].tolist()} are outside [-2π, 2π] radians (wrong unit?)", row=i
            )
        return wrap_angle(x)

    def project(self, x):
        return wrap_angle(x)

    def to_tangent(self, x, v):
        return v

    def exp(self, x, v):
        return wrap_angle(x + v)

    def log(self, x, y):
        return wrap_angle(y - x)

    def tangent_basis(self, x):
        eye = torch.eye(self.n, dtype=x.dtype, device=x.device)
        return eye.expand(*x.shape[:-1], self.n, self.n)

    def random_tangent(self, x, generator=None):
        return torch.randn(x.shape, dtype=x.dtype, device=x.device, generator=generator)

    def random_uniform(self, n, generator=None):
        u = torch.rand(n, self.n, dtype=DTYPE, device=generator_device(generator), generator=generator)
        return wrap_angle(TWO_PI * u - math.pi)

    @property
    def log_volume(self) -> float:
        return self.n * LOG_TWO_PI

    # --- features --------------------------------------------------------------------------
    @property
    def embed_dim(self) -> int:
        return 2 * self.n

    def embed(self, x):
        return torch.cat([torch.cos(x), torch.sin(x)], dim=-1)

    # --- heat flow -------------------------------------------------------------------------
    @property
    def time_range(self) -> tuple[float, float]:
        # t_max: the slowest Fourier mode exp(-t/2) has decayed to ~3e-5 (TV distance < 1e-4 n)
        return (1e-4, 20.0)

    def _sample_forward(self, x0, t, generator=None):
        z = torch.randn(x0.shape, dtype=x0.dtype, device=x0.device, generator=generator)
        return wrap_angle(x0 + t.unsqueeze(-1).sqrt() * z)

    def _per_angle(self, xt, x0, t):
        return wrapped_normal_log_prob_and_score(wrap_angle(xt - x0), t.unsqueeze(-1).expand_as(xt))

    def _log_kernel(self, xt, x0, t):
        return self._per_angle(xt, x0, t)[0].sum(-1)

    def _score(self, xt, x0, t):
        return self._per_angle(xt, x0, t)[1]

    def _log_kernel_and_score(self, xt, x0, t):
        lp, sc = self._per_angle(xt, x0, t)
        return lp.sum(-1), sc

    # --- fixed coordinates -----------------------------------------------------------------
    def given_part(self, given: dict, n: int):
        """``given={angle index: radians}``: one angle or one per sample, finite (wrapped to [-π, π))."""
        def convert(index, v):
            if not bool(torch.isfinite(v).all()):
                raise InputError(f"given: angle {index} has a value that is NaN or infinite", field="given")
            return wrap_angle(v)

        return self._coordinate_given(given, n, "angle", convert)

    # --- pictures --------------------------------------------------------------------------
    def plot_coordinates(self, x):
        """The first two angles (radians) on [-π, π)²; a single angle is drawn against 0."""
        import numpy as np

        x = x.cpu()
        a = x[:, :2].numpy() if self.n >= 2 else np.stack([x[:, 0].numpy(), np.zeros(x.shape[0])], 1)
        lim = (-math.pi, math.pi)
        return a, ("angle 0 (rad)", "angle 1 (rad)" if self.n >= 2 else ""), (lim, lim)
