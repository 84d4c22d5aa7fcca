"""Compositions: the open simplex of K positive parts summing to 1, with the Aitchison geometry.

Geometry
--------
Aitchison (1986, *The Statistical Analysis of Compositional Data*, Chapman &
Hall) made the open simplex S^K = {x ∈ R^K : x_i > 0, Σ x_i = 1} a Euclidean
vector space: "addition" is perturbation x ⊕ y = C(x ∘ y) and scaling is
powering, with C(z) = z / Σ z the closure. The centred log-ratio

    clr(x) = log x - mean(log x)                       (a zero-sum vector of R^K)

is an isometry onto the hyperplane {v : Σ v = 0} with the Euclidean inner
product; composing it with an orthonormal basis of that hyperplane gives the
isometric log-ratio coordinates of Egozcue, Pawlowsky-Glahn, Mateu-Figueras &
Barceló-Vidal (2003, "Isometric logratio transformations for compositional
data analysis", Math. Geol. 35(3), 279–300, doi:10.1023/A:1023818214614)

    ilr(x) = H clr(x) = H log x ∈ R^{K-1},    ilr^{-1}(y) = C(exp(H^T y)),

where H is the (K-1) × K Helmert contrast matrix (row i has 1/sqrt(i(i+1)) in
its first i places and -i/sqrt(i(i+1)) in place i+1; see :func:`helmert_basis`).
So S^K is a flat Riemannian manifold isometric to R^{K-1}. In heatwalk:

- tangent vectors are clr vectors (zero-sum vectors of R^K), the ambient
  representation; ``to_tangent`` subtracts the mean, the inner product is the
  Euclidean dot product of clr vectors (the Aitchison inner product);
- ``exp(x, v) = C(x ∘ e^v)`` (perturbation), ``log(x, y) = clr(y) - clr(x)``,
  and ``dist`` is the Aitchison distance |clr(y) - clr(x)|;
- the Riemannian (Aitchison) volume is the pull-back of Lebesgue measure on
  R^{K-1} by ilr; it has infinite total mass (``log_volume = inf``), so there is
  no uniform law and ``random_uniform`` raises.

Forward process
---------------
The space is not compact, so plain Brownian motion has no stationary law.
The forward process is the Ornstein–Uhlenbeck flow of this geometry,

    dY = -(1/2) Y dt + dB     in ilr coordinates Y = ilr(X),

i.e. generator (1/2)Δ (B is the Brownian motion of the Aitchison metric) plus
the confining drift f(x) = -(1/2) clr(x) (``drift``). Its kernel is exact for
every K (:mod:`heatwalk.kernels.ornstein_uhlenbeck`):

    ilr(X_t) | X_0 = x0  ~  N( e^{-t/2} ilr(x0), (1 - e^{-t}) I_{K-1} ),

and its stationary law, the prior the samplers start from, is the standard
logistic-normal law ilr(X) ~ N(0, I_{K-1}) (Aitchison & Shen 1980,
"Logistic-normal distributions", Biometrika 67(2), 261–272; in additive
log-ratio coordinates it is N(0, I + 1 1^T)). The cost of this construction:
compositions with parts exactly 0 are outside the open simplex and must be
replaced before fitting (``from_rows(..., zero_replacement=δ)``).

Densities
---------
``log_kernel`` and ``prior_log_prob`` are w.r.t. the Aitchison volume (so the
score is a Riemannian gradient, a clr vector). heatwalk reports simplex
densities w.r.t. Lebesgue measure on the first K-1 parts (as
``scipy.stats.dirichlet``); the conversion term is ``log_volume_density``:

    d(Aitchison volume) / d(x_1 … x_{K-1}) = 1 / ( sqrt(K) · Π_{i=1}^{K} x_i ).

Derivation: with x_K = 1 - Σ_{i<K} x_i, the additive log-ratio
z_i = log(x_i / x_K) has Jacobian ∂z_i/∂x_j = δ_ij / x_i + 1/x_K, of
determinant (Π_{i<K} 1/x_i)(1 + Σ_{i<K} x_i / x_K) = 1 / Π_{i≤K} x_i. Since H
annihilates constant vectors, ilr(x) = H log x = H (log x - log x_K 1) =
H_{:, 1:K-1} z, and H_{:, 1:K-1} is the minor of the orthogonal matrix
Q = [H; 1^T/sqrt(K)] obtained by deleting its last row and column, whose
determinant is ±Q_KK = ±1/sqrt(K) (cofactors of an orthogonal matrix are
det(Q)·Q). Multiplying the two determinants gives the formula.

Time
----
``time_range`` = (1e-4, 20): at t = 20 the mean e^{-t/2} ilr(x0) has shrunk by
e^{-10} = 4.5e-5 and the variance differs from 1 by e^{-20} = 2e-9, so for data
with |ilr(x0)| ≤ 20 (parts down to about 1e-9 of the largest) the law at t_max
is within KL = e^{-t}|ilr(x0)|²/2 ≤ 5e-7 nats of the prior.
"""

from __future__ import annotations

import math
from functools import lru_cache

import torch

from heatwalk.checks import check_int, check_positive_number
from heatwalk.errors import InputError
from heatwalk.kernels.ornstein_uhlenbeck import ou_log_prob_and_score, ou_sample, standard_normal_log_prob
from heatwalk.spaces.base import DTYPE, Option, as_points, first_bad_row, generator_device
from heatwalk.spaces.manifold import Manifold

#: rows whose parts sum to within this of 1 are closed (divided by their sum); others are rejected
SUM_TOLERANCE = 1e-6


@lru_cache(maxsize=None)
def _helmert(K: int) -> torch.Tensor:
    # cpu: a cached CPU table; callers take .to(x.device)
    h = torch.zeros(K - 1, K, dtype=DTYPE)
    for i in range(1, K):  # row i-1 contrasts the first i parts with part i+1
        c = 1.0 / math.sqrt(i * (i + 1))
        h[i - 1, :i] = c
        h[i - 1, i] = -i * c
    return h


def helmert_basis(K: int) -> torch.Tensor:
    """The (K-1, K) Helmert contrast matrix H: orthonormal rows, each orthogonal to (1, …, 1).

    Row i (1-based) is (1, …, 1, -i, 0, …, 0) / sqrt(i(i+1)) with i ones: the ilr
    basis of Egozcue et al. (2003) in clr coordinates.
    """
    return _helmert(K).clone()


def closure(x: torch.Tensor) -> torch.Tensor:
    """C(x) = x / Σ x along the last axis."""
    return x / x.sum(-1, keepdim=True)


close_rows = closure  # the same operation, for methods whose ``closure`` argument shadows the name


def clr(x: torch.Tensor) -> torch.Tensor:
    """Centred log-ratio log x - mean(log x) of compositions (..., K): zero-sum vectors (..., K)."""
    lx = torch.log(x)
    return lx - lx.mean(-1, keepdim=True)


def ilr(x: torch.Tensor) -> torch.Tensor:
    """Isometric log-ratio coordinates H log x of compositions (..., K): shape (..., K-1)."""
    h = _helmert(x.shape[-1]).to(x.device, x.dtype)
    return torch.log(x) @ h.T


def ilr_inverse(y: torch.Tensor) -> torch.Tensor:
    """Composition C(exp(H^T y)) with ilr coordinates y (..., K-1): shape (..., K), computed as a softmax."""
    h = _helmert(y.shape[-1] + 1).to(y.device, y.dtype)
    return torch.softmax(y @ h, dim=-1)


class Simplex(Manifold):
    """Compositions of K ≥ 2 positive parts summing to 1; shape (..., K); intrinsic dimension K-1.

    Aitchison geometry (flat, isometric to R^{K-1} through ilr); forward process
    the Ornstein–Uhlenbeck flow dY = -(1/2) Y dt + dB in ilr coordinates, whose
    stationary standard logistic-normal law is the prior. See the module
    docstring for the construction, the references and the density conventions.

    ``validate`` rejects NaN/infinite entries, negative parts, parts exactly 0
    (read such data with ``from_rows(..., zero_replacement=δ)``), and rows whose
    sum differs from 1 by more than ``SUM_TOLERANCE`` = 1e-6; rows within the
    tolerance are closed (divided by their sum).
    """

    kind = "simplex"
    plot_kind = "compositions"
    reference_measure = "Lebesgue measure on the first K−1 parts (as scipy.stats.dirichlet)"
    file_options = (
        Option("zero_replacement", float, "replace parts that are exactly 0 by DELTA (multiplicative replacement)",
               metavar="DELTA", minimum=0, open_minimum=True),
        Option("closure", bool, "close each row: divide it by its total (amounts, percentages, rounded shares)"),
    )

    def __init__(self, K: int = 3):
        self.K = check_int("Simplex: K (number of parts)", K, minimum=2)
        self.dim = K - 1
        self.ambient_shape = (K,)

    def config(self) -> dict:
        return {"kind": "simplex", "K": self.K}

    # --- file rows -------------------------------------------------------------------------
    @classmethod
    def from_table(cls, n_columns: int, **options) -> "Simplex":
        """One part per column."""
        cls.check_file_options(options)
        return cls(n_columns)

    def from_rows(self, rows, *, zero_replacement: float | None = None, closure: bool = False) -> torch.Tensor:
        """Read compositions from an (n, K) float array.

        Parameters
        ----------
        zero_replacement : None (default) or a float δ > 0. None rejects parts
            that are exactly 0. A float opts in to the *multiplicative
            replacement* of Martín-Fernández, Barceló-Vidal & Pawlowsky-Glahn
            (2003, "Dealing with zeros and missing values in compositional data
            sets using nonparametric imputation", Math. Geol. 35(3), 253–278):
            in a row with k zero parts each zero becomes δ and every non-zero
            part x_j becomes (1 - k δ) x_j, so the row still sums to 1 and the
            ratios between the non-zero parts are kept. δ must be smaller than
            every non-zero part of the rows it is applied to (the paper's
            setting: δ below the detection limit) and k δ < 1.
        closure : if True, each row is closed: divided by its total (which must be
            > 0) instead of being required to sum to 1 within 1e-6: for rows
            of amounts (money, counts), percentages, or shares rounded so
            that they do not add up to 1. Applied before zero replacement.

        Raises :class:`InputError` naming the row (and column) of the first problem.
        """
        if zero_replacement is not None:
            check_positive_number("zero_replacement", zero_replacement)
            if zero_replacement * self.K >= 1:
                raise InputError(f"zero_replacement δ = {zero_replacement:g} is too large for K = {self.K} parts: "
                                 f"needs δ < 1/K = {1 / self.K:g}", field="zero_replacement")
        x = as_points(rows, self.ambient_shape, "compositions")
        self._check_nonnegative(x)
        if closure:
            total = x.sum(-1)
            i = first_bad_row(total <= 0)
            if i is not None:
                raise InputError(f"row {i}: parts add up to {float(total[i]):g}; closure needs a positive total",
                                 row=i)
            x = x / total.unsqueeze(-1)
        else:
            self._check_sums(x)
        x = close_rows(x)
        zero = x == 0
        i = first_bad_row(zero.any(-1))
        if i is not None:
            if zero_replacement is None:
                self._raise_zero(x, i)
            x = self._replace_zeros(x, zero, float(zero_replacement))
        return self.validate(x)

    def to_rows(self, x: torch.Tensor, **options) -> torch.Tensor:
        """Compositions as rows of K parts summing to 1 (the reading options do not change how rows are written)."""
        return super().to_rows(x, **options)

    def column_names(self, **options) -> list[str]:
        self.check_file_options(options)
        return [f"part{i}" for i in range(self.K)]

    @staticmethod
    def _replace_zeros(x: torch.Tensor, zero: torch.Tensor, delta: float) -> torch.Tensor:
        """Multiplicative replacement of the zero parts by δ (see :meth:`from_rows`)."""
        k = zero.sum(-1, keepdim=True).to(DTYPE)
        smallest = torch.where(zero, torch.full_like(x, math.inf), x).min(-1).values
        bad = zero.any(-1) & (smallest <= delta)
        i = first_bad_row(bad)
        if i is not None:
            raise InputError(f"row {i}: zero_replacement δ = {delta:g} is not smaller than the row's smallest "
                             f"non-zero part {float(smallest[i]):g}; choose δ below the detection limit of the "
                             f"data", row=i, field="zero_replacement")
        bad = k.squeeze(-1) * delta >= 1
        i = first_bad_row(bad)
        if i is not None:
            raise InputError(f"row {i}: {int(k[i])} zero parts times δ = {delta:g} is not below 1", row=i,
                             field="zero_replacement")
        x = torch.where(zero, torch.full_like(x, delta), (1 - k * delta) * x)
        return x

    # --- validation ------------------------------------------------------------------------
    @staticmethod
    def _check_nonnegative(x: torch.Tensor) -> None:
        i = first_bad_row((x < 0).any(-1))
        if i is not None:
            j = int((x[i] < 0).nonzero()[0, 0])
            raise InputError(f"row {i}, column {j}: part {float(x[i, j]):g} is negative; parts of a composition "
                             f"must be positive", row=i, field=str(j))

    @staticmethod
    def _check_sums(x: torch.Tensor) -> None:
        s = x.sum(-1)
        i = first_bad_row((s - 1).abs() > SUM_TOLERANCE)
        if i is not None:
            raise InputError(f"row {i}: parts sum to {float(s[i]):.9g}, not 1 (tolerance {SUM_TOLERANCE:g}); "
                             f"rows of amounts, percentages or rounded shares can be read with the reading "
                             f"option closure=True", row=i)

    @staticmethod
    def _raise_zero(x: torch.Tensor, i: int) -> None:
        j = int((x[i] == 0).nonzero()[0, 0])
        raise InputError(f"row {i}, column {j}: part is exactly 0; compositions with zero parts lie outside the "
                         f"open simplex (log-ratios are infinite). Read the rows with the reading option "
                         f"zero_replacement=δ (multiplicative replacement by a small δ, opt-in) or remove the row",
                         row=i, field=str(j))

    def validate(self, x) -> torch.Tensor:
        """Check compositions; return them as float64 (n, K) rows summing to 1.

        Rejects (naming the first bad row and column) NaN or infinite entries,
        negative parts, parts exactly 0, and rows whose sum differs from 1 by
        more than 1e-6; rows within that tolerance are divided by their sum.
        """
        x = as_points(x, self.ambient_shape, "compositions")
        self._check_nonnegative(x)
        i = first_bad_row((x == 0).any(-1))
        if i is not None:
            self._raise_zero(x, i)
        self._check_sums(x)
        return closure(x)

    # --- geometry --------------------------------------------------------------------------
    def project(self, x):
        """Closure C(x) = x / Σ x of positive vectors: in the Aitchison geometry x and c·x (c > 0) are the same composition."""
        return closure(x)

    def to_tangent(self, x, v):
        """v - mean(v): orthogonal projection onto the zero-sum (clr) vectors."""
        return v - v.mean(-1, keepdim=True)

    def exp(self, x, v):
        """Perturbation C(x ∘ e^v), evaluated as softmax(log x + v)."""
        return torch.softmax(torch.log(x) + v, dim=-1)

    def log(self, x, y):
        """clr(y) - clr(x)."""
        return clr(y) - clr(x)

    def tangent_basis(self, x):
        """The rows of the Helmert matrix H (clr vectors of the ilr basis), the same at every x."""
        h = _helmert(self.K).to(x.device, x.dtype)
        return h.expand(*x.shape[:-1], self.K - 1, self.K)

    def random_tangent(self, x, generator=None):
        z = torch.randn(*x.shape[:-1], self.K - 1, dtype=x.dtype, device=x.device, generator=generator)
        return z @ _helmert(self.K).to(x.device, x.dtype)

    def random_uniform(self, n, generator=None):
        raise InputError(f"{self!r} is not compact: its Aitchison volume is infinite, so there is no uniform law "
                         f"on it; prior_sample draws from the stationary (standard logistic-normal) law")

    @property
    def log_volume(self) -> float:
        return math.inf

    # --- coordinates -----------------------------------------------------------------------
    def clr(self, x):
        return clr(x)

    def ilr(self, x):
        return ilr(x)

    def ilr_inverse(self, y):
        return ilr_inverse(y)

    def plot_coordinates(self, x):
        """2-D picture coordinates for :func:`heatwalk.frontend.plots.plot_data_and_samples`.

        K = 3: the ternary diagram (part0 at the lower-left corner (0, 0), part1
        at (1, 0), part2 at the top (1/2, sqrt(3)/2)). K > 3: the first two ilr
        coordinates, with limits from the 0.5 % and 99.5 % quantiles of ``x``.
        K = 2 has a one-dimensional picture only: None.
        """
        import numpy as np

        if self.K == 2:
            return None
        if self.K == 3:
            p = x.cpu().numpy()
            xy = np.stack([p[:, 1] + 0.5 * p[:, 2], (math.sqrt(3) / 2) * p[:, 2]], 1)
            return xy, ("ternary: part0 (left), part1 (right)", "part2 (top)"), ((0.0, 1.0), (0.0, math.sqrt(3) / 2))
        y = ilr(x.cpu())[:, :2].numpy()
        lo, hi = np.quantile(y, 0.005, axis=0), np.quantile(y, 0.995, axis=0)
        pad = 0.1 * (hi - lo)
        lims = tuple((float(lo[j] - pad[j]), float(hi[j] + pad[j])) for j in range(2))
        return y, ("ilr coordinate 1", "ilr coordinate 2"), lims

    # --- features --------------------------------------------------------------------------
    @property
    def embed_dim(self) -> int:
        return self.K

    def embed(self, x):
        """clr(x): symmetric in the parts, and the Aitchison geometry is Euclidean in it."""
        return clr(x)

    # --- forward process -------------------------------------------------------------------
    @property
    def time_range(self) -> tuple[float, float]:
        # t_max: see the module docstring (KL to the prior ≤ 5e-7 nats for |ilr(x0)| ≤ 20)
        return (1e-4, 20.0)

    def drift(self, x, t):
        """f(x) = -(1/2) clr(x): the Ornstein–Uhlenbeck pull towards the centre (1/K, …, 1/K)."""
        return -0.5 * clr(x)

    def _sample_forward(self, x0, t, generator=None):
        """Exact draw: ilr(x_t) = e^{-t/2} ilr(x0) + sqrt(1 - e^{-t}) z, z ~ N(0, I_{K-1})."""
        return ilr_inverse(ou_sample(ilr(x0), t, generator))

    def _log_kernel(self, xt, x0, t):
        """log N(ilr(xt); e^{-t/2} ilr(x0), (1 - e^{-t}) I) in nats, w.r.t. the Aitchison volume."""
        return ou_log_prob_and_score(ilr(xt), ilr(x0), t)[0]

    def _score(self, xt, x0, t):
        """Aitchison gradient of ``log_kernel`` in xt, as a clr vector: H^T (-(y - e^{-t/2} y0) / (1 - e^{-t}))."""
        s = ou_log_prob_and_score(ilr(xt), ilr(x0), t)[1]
        return s @ _helmert(self.K).to(xt.device, xt.dtype)

    def denoised_mean(self, x, score, t):
        """Tweedie for the OU flow in ilr coordinates: ilr x̂_0 = e^{t/2} (y + (1 - e^{-t}) ∇_y log p_t)."""
        t = t.reshape(-1, 1)
        y = ilr(x)
        s_ilr = score @ _helmert(self.K).to(x.device, x.dtype).T
        return ilr_inverse(torch.exp(0.5 * t) * (y - torch.expm1(-t) * s_ilr))

    def denoised_scale(self, t):
        """c_t = e^{t/2} (1 - e^{-t}) of the OU flow (see :meth:`Manifold.denoised_scale`)."""
        return torch.exp(0.5 * t) * -torch.expm1(-t)

    def log_volume_density(self, x):
        """log d(Aitchison volume)/d(Lebesgue on x_1..x_{K-1}) = -(1/2) log K - Σ log x_i (module docstring)."""
        return -0.5 * math.log(self.K) - torch.log(x).sum(-1)

    def prior_sample(self, n, generator=None):
        """n draws from the stationary law: ilr(x) ~ N(0, I_{K-1}) (standard logistic-normal)."""
        return ilr_inverse(torch.randn(n, self.K - 1, dtype=DTYPE, device=generator_device(generator),
                                       generator=generator))

    def prior_log_prob(self, x):
        """log N(ilr(x); 0, I) in nats, w.r.t. the Aitchison volume."""
        return standard_normal_log_prob(ilr(x))
