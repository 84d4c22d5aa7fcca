"""The unit sphere S^d ⊂ R^{d+1} with the round metric."""

from __future__ import annotations

import math

import torch

from heatwalk.checks import check_positive_int
from heatwalk.errors import InputError
from heatwalk.kernels.sphere_heat import log_sphere_area, sample_sphere_radius, sphere_heat_log_prob_and_score
from heatwalk.spaces.base import DTYPE, Option, as_points, first_bad_row, generator_device
from heatwalk.spaces.manifold import IsotropicKernel, Manifold

#: points whose norm is within this of 1 are renormalised by ``validate``; others are rejected
NORM_TOLERANCE = 1e-6
#: below this length the component of y orthogonal to x is pure rounding (a few ulps of a unit vector)
_ORTHOGONAL_FLOOR = 8 * float(torch.finfo(DTYPE).eps)


class Sphere(IsotropicKernel, Manifold):
    """Unit vectors of R^{d+1}, shape (..., d+1); intrinsic dimension d ≥ 1.

    Metric: the round metric induced from R^{d+1} (geodesic distance = angle
    between the vectors), total volume |S^d| = 2 π^{(d+1)/2} / Γ((d+1)/2)
    (2π for d = 1, 4π for d = 2). Densities are w.r.t. this Riemannian volume
    (arc length on S^1, area on S^2). Forward process: Brownian motion with
    generator (1/2)Δ, whose kernel depends only on the geodesic distance (see
    :mod:`heatwalk.kernels.sphere_heat`). The prior is uniform.

    ``validate`` accepts vectors whose Euclidean norm is within
    ``NORM_TOLERANCE`` = 1e-6 of 1 and renormalises them to unit length;
    vectors further from the sphere (including zero vectors) are rejected with
    the row and the norm found.

    ``log(x, y)`` at the antipode y = -x (where every direction is minimising)
    returns π times the first vector of ``tangent_basis(x)``: a deterministic
    choice.

    Points of S^1 ⊂ R^2 correspond to angles θ via (cos θ, sin θ); with that
    map ``Sphere(1)`` and ``Torus(1)`` have the same kernel.
    """

    kind = "sphere"
    bounded_embedding = True
    file_options = (Option("lonlat", bool, "S^2 as two columns longitude, latitude in degrees (in that order; "
                           "right ascension and declination the same way)"),)
    plot_kind = "directions"
    reference_measure = "surface area of the unit sphere (steradians on S²)"

    def __init__(self, d: int = 2):
        self.d = check_positive_int("Sphere: d", d)
        self.dim = d
        self.ambient_shape = (d + 1,)

    def config(self) -> dict:
        return {"kind": "sphere", "d": self.d}

    # --- file rows -------------------------------------------------------------------------
    @classmethod
    def from_table(cls, n_columns: int, *, lonlat: bool = False) -> "Sphere":
        """S^{n_columns - 1} from unit vectors, or S^2 from longitude/latitude columns."""
        return cls(2) if lonlat else cls(n_columns - 1)

    def from_rows(self, rows, *, lonlat: bool = False) -> torch.Tensor:
        """Rows of d+1 coordinates of unit vectors; for S^2, ``lonlat=True`` reads two columns in the order
        longitude, latitude, in degrees: longitude in [-360, 360], latitude in [-90, 90]. Right ascension and
        declination (equatorial sky coordinates) are read the same way, RA as longitude, Dec as latitude.
        x = cos(lat) cos(lon), y = cos(lat) sin(lon), z = sin(lat)."""
        if not lonlat:
            return self.validate(rows)
        if self.d != 2:
            raise InputError(f"Sphere(d={self.d}): longitude/latitude rows are only defined for d = 2",
                             field="lonlat")
        x = as_points(rows, (2,), "longitude/latitude rows")
        for j, (name, limit) in enumerate((("longitude", 360.0), ("latitude", 90.0))):
            i = first_bad_row(x[:, j].abs() > limit)
            if i is not None:
                hint = (" (lonlat reads longitude first, then latitude: are the columns swapped?)"
                        if name == "latitude" and float(x[i, 0]) ** 2 <= 8100 else "")
                raise InputError(f"row {i}, column {j}: {name} {float(x[i, j]):g} degrees is outside "
                                 f"[-{limit:g}, {limit:g}]{hint}", row=i, field=str(j))
        lon, lat = torch.deg2rad(x[:, 0]), torch.deg2rad(x[:, 1])
        pts = torch.stack([torch.cos(lat) * torch.cos(lon), torch.cos(lat) * torch.sin(lon), torch.sin(lat)], -1)
        return self.project(pts)

    def to_rows(self, x: torch.Tensor, *, lonlat: bool = False) -> torch.Tensor:
        """Inverse of :meth:`from_rows`; longitudes are written in (-180, 180]."""
        if not lonlat:
            return x.reshape(x.shape[0], -1)
        if self.d != 2:
            raise InputError(f"Sphere(d={self.d}): longitude/latitude rows are only defined for d = 2",
                             field="lonlat")
        lat = torch.atan2(x[:, 2], torch.hypot(x[:, 0], x[:, 1]))
        lon = torch.atan2(x[:, 1], x[:, 0])
        return torch.rad2deg(torch.stack([lon, lat], -1))

    def column_names(self, *, lonlat: bool = False) -> list[str]:
        if lonlat:
            return ["longitude_deg", "latitude_deg"]
        return [f"x{i}" for i in range(self.d + 1)]

    # --- geometry --------------------------------------------------------------------------
    def validate(self, x) -> torch.Tensor:
        x = as_points(x, self.ambient_shape, "unit vectors")
        norm = torch.linalg.vector_norm(x, dim=-1)
        i = first_bad_row((norm - 1).abs() > NORM_TOLERANCE)
        if i is not None:
            what = "is the zero vector" if float(norm[i]) == 0 else f"has norm {float(norm[i]):.10g}"
            raise InputError(f"row {i}: {what}; points of S^{self.d} must be unit vectors "
                             f"(norm within {NORM_TOLERANCE:g} of 1)", row=i)
        return x / norm.unsqueeze(-1)

    def project(self, x):
        norm = torch.linalg.vector_norm(x, dim=-1, keepdim=True)
        i = first_bad_row((norm == 0).reshape(-1))
        if i is not None:
            raise InputError(f"row {i}: the zero vector has no nearest point on S^{self.d}", row=i)
        return x / norm

    def to_tangent(self, x, v):
        return v - (x * v).sum(-1, keepdim=True) * x

    def exp(self, x, v):
        n = torch.linalg.vector_norm(v, dim=-1, keepdim=True)
        small = n < 1e-8
        ns = torch.where(small, torch.ones_like(n), n)
        sinc = torch.where(small, 1 - n * n / 6, torch.sin(ns) / ns)
        y = torch.cos(n) * x + sinc * v
        return y / torch.linalg.vector_norm(y, dim=-1, keepdim=True)

    def _polar(self, x, y):
        """(angle, orthogonal part u of y, |u|, cos) with angle = atan2(|u|, <x, y>)."""
        c = (x * y).sum(-1, keepdim=True)
        u = y - c * x
        s = torch.linalg.vector_norm(u, dim=-1, keepdim=True)
        return torch.atan2(s, c), u, s, c

    def log(self, x, y):
        x, y = torch.broadcast_tensors(x, y)
        theta, u, s, c = self._polar(x, y)
        tiny = s <= _ORTHOGONAL_FLOOR
        factor = torch.where(tiny, torch.ones_like(s), theta / torch.where(tiny, torch.ones_like(s), s))
        v = factor * u
        antipodal = tiny & (c < 0)
        if bool(antipodal.any()):
            v = torch.where(antipodal, math.pi * self.tangent_basis(x)[..., 0, :], v)
        return v

    def dist(self, x, y):
        x, y = torch.broadcast_tensors(x, y)
        return self._polar(x, y)[0].squeeze(-1)

    def tangent_basis(self, x):
        # Householder reflection H = I - 2 v vᵀ/|v|², v = x + sign(x_0) e_0, maps e_0 to ∓x;
        # its columns 1..d are an orthonormal basis of x^⊥ (|v|² = 2(1 + |x_0|) ≥ 2: no cancellation).
        sign = torch.where(x[..., :1] >= 0, 1.0, -1.0).to(x.dtype)
        v = x.clone()
        v[..., :1] = x[..., :1] + sign
        vv = (v * v).sum(-1, keepdim=True)
        eye = torch.eye(self.d + 1, dtype=x.dtype, device=x.device)[1:]  # (d, d+1)
        return eye - 2.0 * (v[..., 1:] / vv).unsqueeze(-1) * v.unsqueeze(-2)

    def random_tangent(self, x, generator=None):
        z = torch.randn(x.shape, dtype=x.dtype, device=x.device, generator=generator)
        return self.to_tangent(x, z)

    @property
    def probe_shape(self) -> tuple[int, ...]:
        return (self.d + 1,)

    def probe_tangent(self, x, z):
        """(I - x xᵀ) z for ambient noise z: covariance I - x xᵀ, the identity on x^⊥, and smooth in x
        (the Householder basis of :meth:`tangent_basis` flips where x_0 changes sign)."""
        return self.to_tangent(x, z)

    def random_uniform(self, n, generator=None):
        z = torch.randn(n, self.d + 1, dtype=DTYPE, device=generator_device(generator), generator=generator)
        return z / torch.linalg.vector_norm(z, dim=-1, keepdim=True)

    @property
    def log_volume(self) -> float:
        return log_sphere_area(self.d)

    # --- features --------------------------------------------------------------------------
    @property
    def embed_dim(self) -> int:
        return self.d + 1

    def embed(self, x):
        return x

    # --- heat flow -------------------------------------------------------------------------
    @property
    def time_range(self) -> tuple[float, float]:
        # t_max: the slowest eigenmode exp(-d t/2) has decayed to 1e-5
        return (1e-4, 2 * math.log(1e5) / self.d)

    def _sample_forward(self, x0, t, generator=None):
        r = sample_sphere_radius(t, self.d, generator)
        direction = self.random_tangent(x0, generator)
        direction = direction / torch.linalg.vector_norm(direction, dim=-1, keepdim=True)
        return self.exp(x0, r.unsqueeze(-1) * direction)

    def _radial_log_kernel(self, r, t):
        return sphere_heat_log_prob_and_score(r, t, self.d)

    # --- pictures --------------------------------------------------------------------------
    def plot_coordinates(self, x):
        """S^2: longitude and latitude in degrees (plate carrée); other dimensions: no picture."""
        if self.d != 2:
            return None
        import numpy as np

        v = x.cpu().numpy()
        lat = np.degrees(np.arcsin(np.clip(v[:, 2], -1, 1)))
        lon = np.degrees(np.arctan2(v[:, 1], v[:, 0]))
        return np.stack([lon, lat], 1), ("longitude (deg)", "latitude (deg)"), ((-180, 180), (-90, 90))
