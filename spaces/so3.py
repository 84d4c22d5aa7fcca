"""The rotation group SO(3), points stored as 3x3 rotation matrices."""

from __future__ import annotations

import math

import torch

from heatwalk.errors import InputError
from heatwalk.kernels.igso3 import LOG_VOLUME, igso3_log_prob_and_dlog, igso3_sample_angle
from heatwalk.spaces.base import DTYPE, Option, as_points, first_bad_row, generator_device
from heatwalk.spaces.manifold import IsotropicKernel, Manifold

#: validate: rows with max |x^T x - I| above this are rejected, below it projected onto SO(3)
ORTHOGONALITY_TOLERANCE = 1e-6
#: from_rows: quaternions with | |q| - 1 | above this are rejected, below it normalised
UNIT_TOLERANCE = 1e-6

FORMATS = ("matrix", "quaternion", "rotvec")
ORDERS = ("wxyz", "xyzw")
_COLUMNS = {"matrix": 9, "quaternion": 4, "rotvec": 3}

# so(3) generators L_i = [e_i]_×
_GENERATORS = torch.tensor(
    [[[0, 0, 0], [0, 0, -1], [0, 1, 0]],
     [[0, 0, 1], [0, 0, 0], [-1, 0, 0]],
     [[0, -1, 0], [1, 0, 0], [0, 0, 0]]], dtype=DTYPE)


def hat(w: torch.Tensor) -> torch.Tensor:
    """(..., 3) -> (..., 3, 3) skew matrix [w]_× with [w]_× v = w × v."""
    return torch.einsum("...i,ijk->...jk", w, _GENERATORS.to(w.device, w.dtype))


def vee(a: torch.Tensor) -> torch.Tensor:
    """Inverse of :func:`hat` on the skew part of ``a``: (..., 3, 3) -> (..., 3)."""
    return 0.5 * torch.stack([a[..., 2, 1] - a[..., 1, 2], a[..., 0, 2] - a[..., 2, 0], a[..., 1, 0] - a[..., 0, 1]], -1)


def exp_so3(w: torch.Tensor) -> torch.Tensor:
    """Rotation matrix Exp([w]_×) (Rodrigues): I + sinc(θ)[w] + ((1-cos θ)/θ²)[w]², θ = |w|."""
    theta = torch.linalg.vector_norm(w, dim=-1)[..., None, None]
    k = hat(w)
    a = torch.sinc(theta / math.pi)  # sin θ / θ
    b = 0.5 * torch.sinc(theta / (2 * math.pi)).square()  # (1 - cos θ)/θ²
    eye = torch.eye(3, dtype=w.dtype, device=w.device)
    return eye + a * k + b * (k @ k)


def matrix_to_quaternion(r: torch.Tensor) -> torch.Tensor:
    """Unit quaternion (w, x, y, z) with w ≥ 0 of rotation matrices (..., 3, 3).

    Shepperd's method: of the four algebraically equivalent formulas the one
    with the largest pivot (1 + tr, 1 + 2 r_ii - tr) is used, so there is no
    cancellation near angle 0 or π.
    """
    r00, r11, r22 = r[..., 0, 0], r[..., 1, 1], r[..., 2, 2]
    tr = r00 + r11 + r22
    d21, d02, d10 = r[..., 2, 1] - r[..., 1, 2], r[..., 0, 2] - r[..., 2, 0], r[..., 1, 0] - r[..., 0, 1]
    s01, s02, s12 = r[..., 0, 1] + r[..., 1, 0], r[..., 0, 2] + r[..., 2, 0], r[..., 1, 2] + r[..., 2, 1]
    cand = torch.stack([
        torch.stack([1 + tr, d21, d02, d10], -1),
        torch.stack([d21, 1 + 2 * r00 - tr, s01, s02], -1),
        torch.stack([d02, s01, 1 + 2 * r11 - tr, s12], -1),
        torch.stack([d10, s02, s12, 1 + 2 * r22 - tr], -1),
    ], -2)  # (..., 4 candidates, 4)
    pivots = torch.stack([1 + tr, 1 + 2 * r00 - tr, 1 + 2 * r11 - tr, 1 + 2 * r22 - tr], -1)
    k = pivots.argmax(-1, keepdim=True)
    q = cand.gather(-2, k.unsqueeze(-1).expand(*k.shape[:-1], 1, 4)).squeeze(-2)
    q = q / torch.linalg.vector_norm(q, dim=-1, keepdim=True)
    return torch.where(q[..., :1] < 0, -q, q)


def quaternion_to_matrix(q: torch.Tensor) -> torch.Tensor:
    """Rotation matrices of unit quaternions (w, x, y, z): (..., 4) -> (..., 3, 3)."""
    w, x, y, z = q.unbind(-1)
    return torch.stack([
        torch.stack([1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)], -1),
        torch.stack([2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)], -1),
        torch.stack([2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)], -1),
    ], -2)


def log_so3(r: torch.Tensor) -> torch.Tensor:
    """Rotation vector ω (|ω| = angle in [0, π]) with Exp([ω]_×) = r: (..., 3, 3) -> (..., 3).

    Computed from the quaternion: ω = 2 atan2(|v|, w) v/|v|, with the ratio
    2 atan2(s, w)/s replaced by its Taylor series 2/w (1 - s²/(3w²)) for
    s < 1e-6 (truncation error O(s⁴) < 1e-24). At angle π exactly either of
    the two opposite rotation vectors is returned.
    """
    q = matrix_to_quaternion(r)
    w, v = q[..., 0], q[..., 1:]
    s = torch.linalg.vector_norm(v, dim=-1)
    small = s < 1e-6
    s_safe = torch.where(small, torch.ones_like(s), s)
    w_safe = torch.where(small, w, torch.ones_like(w))  # w ≈ 1 on the small branch
    ratio = torch.where(small, 2 / w_safe * (1 - s * s / (3 * w_safe * w_safe)), 2 * torch.atan2(s, w) / s_safe)
    return ratio.unsqueeze(-1) * v


def rotation_angle(r: torch.Tensor) -> torch.Tensor:
    """Rotation angle in [0, π] of rotation matrices (..., 3, 3), robust near 0 and π."""
    q = matrix_to_quaternion(r)
    return 2 * torch.atan2(torch.linalg.vector_norm(q[..., 1:], dim=-1), q[..., 0])


class SO3(IsotropicKernel, Manifold):
    """Rotations of R^3 as 3x3 matrices with det +1; shape (..., 3, 3).

    Metric: bi-invariant, <x[a]_×, x[b]_×> = a·b = (1/2) tr(u^T v) on tangent
    vectors u = x[a]_×, v = x[b]_× (tangent vectors are stored as ambient 3x3
    matrices), so a rotation by angle w is a geodesic of length w. The
    Riemannian volume has total mass 8π² (``log_volume``) and the rotations
    with angle in [w, w + dw] from a point have volume 8π(1 - cos w) dw.
    Geodesic distance: the rotation angle of x^T y, in [0, π].

    Forward process: Brownian motion with generator (1/2)Δ. Its kernel is
    IGSO(3), a function of the angle of x_0^T x_t only
    (:mod:`heatwalk.kernels.igso3`); ``log_kernel`` is its log-density w.r.t.
    the Riemannian volume, in nats. The prior is the uniform (Haar) law.
    """

    kind = "so3"
    bounded_embedding = True
    dim = 3
    ambient_shape = (3, 3)
    plot_kind = "rotations"
    reference_measure = "bi-invariant volume (rotation by ω has length ω; total 8π²)"
    file_options = (
        Option("rotation_format", str, "rotations as 9 matrix entries (row-major), 4 quaternion components or a "
               "rotation vector", default="matrix", choices=FORMATS),
        Option("quaternion_order", str, "quaternion component order, scalar first or last (required for "
               "quaternions: there is no default)", choices=ORDERS),
        Option("degrees", bool, "rotation vectors are in degrees (default: radians)"),
    )

    def config(self) -> dict:
        return {"kind": "so3"}

    # --- file rows -------------------------------------------------------------------------
    @classmethod
    def from_table(cls, n_columns: int, **options) -> "SO3":
        """SO(3) whatever the format; the column count is checked against the format when reading."""
        cls.check_file_options(options)
        return cls()

    @staticmethod
    def _check_options(format, order, degrees) -> None:
        if format not in FORMATS:
            raise InputError(f"unknown rotation format {format!r}; expected one of {list(FORMATS)}",
                             field="rotation_format")
        if format == "quaternion":
            if order is None:
                raise InputError("quaternion component order must be stated: wxyz or xyzw",
                                 field="quaternion_order")
            if order not in ORDERS:
                raise InputError(f"quaternion component order must be wxyz or xyzw, got {order!r}",
                                 field="quaternion_order")
        elif order is not None:
            raise InputError(f"quaternion_order applies to quaternions only, got {order!r} with rotation_format "
                             f"{format!r}", field="quaternion_order")
        if degrees and format != "rotvec":
            raise InputError(f"degrees applies to format 'rotvec' only, got rotation_format {format!r}", field="degrees")

    def n_columns_for(self, *, rotation_format: str = "matrix", quaternion_order: str | None = None,
                      degrees: bool = False) -> int:
        """Columns one rotation takes in a file: 9 (matrix), 4 (quaternion) or 3 (rotvec)."""
        format, order = rotation_format, quaternion_order
        self._check_options(format, order, degrees)
        return _COLUMNS[format]

    def from_rows(self, rows, *, rotation_format: str = "matrix", quaternion_order: str | None = None,
                  degrees: bool = False) -> torch.Tensor:
        """Read rotations from an (n, columns) float array.

        Parameters
        ----------
        rotation_format : "matrix" (9 columns, the matrix row-major), "quaternion"
            (4 columns, unit quaternion; rows with | |q| - 1 | ≤ 1e-6 are
            normalised, others and zero rows rejected) or "rotvec" (3
            columns, rotation vector axis·angle, any length).
        quaternion_order : "wxyz" or "xyzw", required for quaternions (scalar first or last).
        degrees : rotation vectors in degrees instead of radians.

        Matrices go through :meth:`validate`. Raises :class:`InputError` naming the row.
        """
        format, order = rotation_format, quaternion_order
        ncol = self.n_columns_for(rotation_format=format, quaternion_order=order, degrees=degrees)
        # cpu: rows read from a file are on the CPU
        rows = torch.as_tensor(rows, dtype=DTYPE)
        if rows.dim() != 2 or rows.shape[1] != ncol:
            raise InputError(f"rotation_format {format!r} takes {ncol} columns per row, got an array of shape "
                             f"{tuple(rows.shape)}", field="rotation_format")
        rows = as_points(rows, (ncol,), f"{format} rows")
        if format == "matrix":
            return self.validate(rows.reshape(-1, 3, 3))
        if format == "rotvec":
            return exp_so3(torch.deg2rad(rows) if degrees else rows)
        q = rows if order == "wxyz" else rows[:, [3, 0, 1, 2]]
        norm = torch.linalg.vector_norm(q, dim=-1)
        i = first_bad_row(norm == 0)
        if i is not None:
            raise InputError(f"row {i}: zero quaternion (norm 0) is not a rotation", row=i)
        i = first_bad_row((norm - 1).abs() > UNIT_TOLERANCE)
        if i is not None:
            raise InputError(f"row {i}: quaternion is not a unit quaternion: norm {float(norm[i]):.9g} differs from 1 "
                             f"by more than {UNIT_TOLERANCE:g}", row=i)
        return quaternion_to_matrix(q / norm.unsqueeze(-1))

    def to_rows(self, x: torch.Tensor, *, rotation_format: str = "matrix", quaternion_order: str | None = None,
                degrees: bool = False) -> torch.Tensor:
        """Inverse of :meth:`from_rows`. Quaternions are written with w ≥ 0; rotation vectors have length ≤ π (180°)."""
        format, order = rotation_format, quaternion_order
        self._check_options(format, order, degrees)
        if format == "matrix":
            return x.reshape(x.shape[0], 9)
        if format == "rotvec":
            v = log_so3(x)
            return torch.rad2deg(v) if degrees else v
        q = matrix_to_quaternion(x)
        return q if order == "wxyz" else q[:, [1, 2, 3, 0]]

    def column_names(self, *, rotation_format: str = "matrix", quaternion_order: str | None = None,
                     degrees: bool = False) -> list[str]:
        format, order = rotation_format, quaternion_order
        self._check_options(format, order, degrees)
        if format == "matrix":
            return [f"r{i}{j}" for i in range(1, 4) for j in range(1, 4)]
        if format == "rotvec":
            unit = "deg" if degrees else "rad"
            return [f"rotvec_{c}_{unit}" for c in "xyz"]
        return [f"q{c}" for c in order]

    @staticmethod
    def from_euler(angles, seq: str, *, degrees: bool = False) -> torch.Tensor:
        """Rotation matrices (n, 3, 3) from Euler angles (n, 3) in the stated convention ``seq``.

        ``seq`` is scipy's: three axes from x, y, z, upper case for intrinsic rotations ("ZYZ", "XYZ") and
        lower case for extrinsic ones ("zyx"); there is no default, since conventions differ between fields.
        Computed by ``scipy.spatial.transform.Rotation.from_euler``.
        """
        from scipy.spatial.transform import Rotation

        a = as_points(angles, (3,), "Euler angles").numpy()
        if not isinstance(seq, str) or len(seq) != 3 or not (set(seq) <= set("xyz") or set(seq) <= set("XYZ")):
            raise InputError(f"Euler angle convention must be three axes like 'ZYZ' (intrinsic) or 'xyz' "
                             f"(extrinsic), got {seq!r}", field="seq")
        # cpu: computed by scipy on the CPU
        return torch.as_tensor(Rotation.from_euler(seq, a, degrees=degrees).as_matrix(), dtype=DTYPE)

    # --- geometry --------------------------------------------------------------------------
    def validate(self, x) -> torch.Tensor:
        """Check rotation matrices; return them as float64 (n, 3, 3) on SO(3).

        Accepts arrays or tensors of 3x3 matrices and ``scipy.spatial.transform.Rotation`` objects
        (their matrices). Rows must be finite 3x3 matrices with max |x^T x - I| ≤ 1e-6 and det > 0.
        Rows within that tolerance are projected onto SO(3) by SVD (nearest rotation in the Frobenius
        norm), so the result is orthogonal to rounding. Raises :class:`InputError` naming the first bad row.
        """
        if type(x).__module__.startswith("scipy.spatial.transform"):
            x = x.as_matrix()
        x = as_points(x, self.ambient_shape, "rotation matrices")
        eye = torch.eye(3, dtype=DTYPE, device=x.device)
        err = (x.transpose(-1, -2) @ x - eye).abs().flatten(1).max(-1).values
        i = first_bad_row(err > ORTHOGONALITY_TOLERANCE)
        if i is not None:
            raise InputError(f"row {i}: not a rotation matrix: max |x^T x - I| = {float(err[i]):.3g} exceeds the "
                             f"tolerance {ORTHOGONALITY_TOLERANCE:g}", row=i)
        det = torch.linalg.det(x)
        i = first_bad_row(det < 0)
        if i is not None:
            raise InputError(f"row {i}: determinant {float(det[i]):.6g}: a reflection, not a rotation", row=i)
        return self.project(x)

    def project(self, x):
        """Nearest rotation in the Frobenius norm: U diag(1, 1, det(UV^T)) V^T from the SVD x = U S V^T."""
        u, _, vh = torch.linalg.svd(x)
        d = torch.linalg.det(u @ vh)
        u = torch.cat([u[..., :2], u[..., 2:] * d[..., None, None]], dim=-1)
        return u @ vh

    def inner(self, x, u, v):
        """(1/2) tr(u^T v)."""
        return 0.5 * (u * v).sum((-1, -2))

    def to_tangent(self, x, v):
        """x · skew(x^T v): orthogonal projection in the metric (a multiple of the Frobenius one on the ambient space)."""
        a = x.transpose(-1, -2) @ v
        return x @ (0.5 * (a - a.transpose(-1, -2)))

    def exp(self, x, v):
        return x @ exp_so3(vee(x.transpose(-1, -2) @ v))

    def log(self, x, y):
        return x @ hat(log_so3(x.transpose(-1, -2) @ y))

    def dist(self, x, y):
        """Rotation angle of x^T y, in [0, π]."""
        return rotation_angle(x.transpose(-1, -2) @ y)

    def tangent_basis(self, x):
        """x L_i with L_i = [e_i]_× (orthonormal: (1/2) tr(L_i^T L_j) = δ_ij)."""
        return x.unsqueeze(-3) @ _GENERATORS.to(x.device, x.dtype)

    def random_tangent(self, x, generator=None):
        """x [z]_× with z ~ N(0, I_3)."""
        z = torch.randn(*x.shape[:-2], 3, dtype=x.dtype, device=x.device, generator=generator)
        return x @ hat(z)

    def random_uniform(self, n, generator=None):
        """Haar-distributed rotations: normalised 4-D Gaussians are uniform unit quaternions."""
        q = torch.randn(n, 4, dtype=DTYPE, device=generator_device(generator), generator=generator)
        return quaternion_to_matrix(q / torch.linalg.vector_norm(q, dim=-1, keepdim=True))

    @property
    def log_volume(self) -> float:
        return LOG_VOLUME

    # --- features --------------------------------------------------------------------------
    @property
    def embed_dim(self) -> int:
        return 9

    def embed(self, x):
        return x.flatten(start_dim=-2)

    # --- heat flow -------------------------------------------------------------------------
    @property
    def time_range(self) -> tuple[float, float]:
        # t_max: the slowest mode (l = 1, weight 3 e^{-t} χ_1, |χ_1| ≤ 3) is below 9 e^{-10} = 4e-4 of the uniform density
        return (1e-4, 10.0)

    def _sample_forward(self, x0, t, generator=None):
        """x0 · Exp(w a): angle w from the exact IGSO(3) angle law, axis a uniform on S^2."""
        w = igso3_sample_angle(t, generator)
        axis = torch.randn(*t.shape, 3, dtype=DTYPE, device=x0.device, generator=generator)
        axis = axis / torch.linalg.vector_norm(axis, dim=-1, keepdim=True)
        return x0 @ exp_so3(w.unsqueeze(-1) * axis)

    def _radial_coordinates(self, xt, x0):
        v = self.log(xt, x0)
        return self.norm(xt, v), v

    def _log_kernel(self, xt, x0, t):
        return igso3_log_prob_and_dlog(self.dist(x0, xt), t)[0]

    def _radial_log_kernel(self, w, t):
        """IGSO(3) log-density and d/dw at angle w; d/dw log p is odd in w, so it is 0 at w = 0."""
        positive = w > 0
        lp, d = igso3_log_prob_and_dlog(torch.where(positive, w, torch.ones_like(w)), t)
        if not bool(positive.all()):
            lp = torch.where(positive, lp, igso3_log_prob_and_dlog(w, t)[0])
        return lp, torch.where(positive, d, torch.zeros_like(d))

    # --- pictures --------------------------------------------------------------------------
    def plot_coordinates(self, x):
        """Rotation axis directions as longitude/latitude in degrees (the angle is not shown)."""
        import numpy as np

        axis = vee(x).cpu().numpy()
        axis /= np.maximum(np.linalg.norm(axis, axis=1, keepdims=True), 1e-12)
        lat = np.degrees(np.arcsin(np.clip(axis[:, 2], -1, 1)))
        lon = np.degrees(np.arctan2(axis[:, 1], axis[:, 0]))
        return np.stack([lon, lat], 1), ("axis longitude (deg)", "axis latitude (deg)"), ((-180, 180), (-90, 90))
