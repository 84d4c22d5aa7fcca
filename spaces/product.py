"""Products of spaces: joint models of mixed data (angles with residue types, orientations with positions).

A point of ``Product(A, B, …)`` is a tuple ``(x_A, x_B, …)`` of factor points
that share one leading batch size n: ``x_A`` has shape (n, *A.ambient_shape)
(float64 on manifolds, int64 codes on finite spaces), and so on. A table row
holds the factors' columns side by side (``from_rows`` splits them by each
factor's column count).

The diffusion clock
-------------------
Every factor keeps its own forward process, kernel and time range. One clock
τ ∈ [0, 1] drives them all: factor i is at time

    t_i(τ) = t_min,i (t_max,i / t_min,i)^τ      (manifolds: geometric in t)
    t_i(τ) = t_min,i + τ (t_max,i - t_min,i)    (finite spaces: linear in t)

so uniform clock times give each factor the training distribution of its own
objective (log-uniform, resp. uniform t) and a uniform clock grid gives each its
own sampling grid (geometric, resp. linear). τ = 1 is every factor's prior.
``sample_forward(x0, τ)`` and ``log_kernel(xt, x0, τ)`` take clock times.

The measure of a product is the product of the factors' base measures;
``log_kernel`` is the sum of the factors' log-kernels, in nats.
"""

from __future__ import annotations

import math
from typing import ClassVar

import torch

from heatwalk.errors import InputError
from heatwalk.spaces.base import DTYPE, Space
from heatwalk.spaces.finite import FiniteStateSpace
from heatwalk.spaces.manifold import Manifold


class Product(Space):
    """The product of ``factors`` (any mix of manifolds and finite state spaces); see the module docstring."""

    kind = "product"
    plot_kind = "factors"
    reference_measure = "the product of the factors' measures"
    objective_name: ClassVar[str] = "product"
    max_time: ClassVar[float] = 1.0

    def __init__(self, *factors: Space):
        if len(factors) < 2:
            raise InputError(f"Product needs at least two factors, got {len(factors)}", field="factors")
        for i, f in enumerate(factors):
            if not isinstance(f, (Manifold, FiniteStateSpace)) or isinstance(f, Product):
                raise InputError(f"Product: factor {i} must be a manifold or a finite state space (not a product), "
                                 f"got {f!r}", field="factors")
        self.factors = tuple(factors)
        self.dim = sum(f.dim for f in factors)
        self.ambient_shape = ()  # points are tuples; see the factors' shapes
        self.is_manifold = tuple(isinstance(f, Manifold) for f in factors)

    def config(self) -> dict:
        return {"kind": "product", "factors": [f.config() for f in self.factors]}

    @classmethod
    def from_config(cls, args: dict) -> "Product":
        from heatwalk.spaces import from_config

        if not isinstance(args.get("factors"), list):
            raise InputError("product config: 'factors' must be a list of space configs", field="factors")
        return cls(*[from_config(c) for c in args["factors"]])

    def __repr__(self) -> str:
        return f"Product({', '.join(map(repr, self.factors))})"

    @property
    def capabilities(self) -> frozenset[str]:
        return frozenset()

    # ----- batches of tuples --------------------------------------------------------------------
    def n_points(self, x) -> int:
        return int(x[0].shape[0])

    def take(self, x, index):
        return tuple(xi[index] for xi in x)

    def validate(self, x) -> tuple:
        """A tuple of validated factor batches of one common length; errors name the factor."""
        if isinstance(x, torch.Tensor) or not isinstance(x, (tuple, list)) or len(x) != len(self.factors):
            raise InputError(f"{self!r}: points are a tuple of {len(self.factors)} factor arrays, got "
                             f"{type(x).__name__}{'' if not isinstance(x, (tuple, list)) else f' of {len(x)}'}",
                             field="data")
        out = []
        for i, (f, xi) in enumerate(zip(self.factors, x)):
            try:
                out.append(f.validate(xi))
            except InputError as e:
                raise InputError(f"factor {i} ({f!r}): {e.message}", row=e.row, field=e.field) from None
        sizes = [int(o.shape[0]) for o in out]
        if len(set(sizes)) != 1:
            raise InputError(f"{self!r}: the factors' data have different lengths {sizes}", field="data")
        return tuple(out)

    def dist(self, x, y):
        """sqrt(Σ d_i²) over the factors (Hamming distance for finite factors)."""
        return torch.sqrt(sum(f.dist(a, b).to(DTYPE) ** 2 for f, a, b in zip(self.factors, x, y)))

    def pairwise_dist(self, x, y, chunk: int = 2048) -> torch.Tensor:
        return torch.sqrt(sum(f.pairwise_dist(a, b, chunk) ** 2 for f, a, b in zip(self.factors, x, y)))

    def random_uniform(self, n, generator=None):
        return tuple(f.random_uniform(n, generator) for f in self.factors)

    @property
    def log_volume(self) -> float:
        return sum(f.log_volume for f in self.factors)

    @property
    def embed_dim(self) -> int:
        return sum(f.embed_dim for f in self.factors)

    def embed(self, x):
        return torch.cat([f.embed(xi) for f, xi in zip(self.factors, x)], dim=-1)

    # ----- tables ---------------------------------------------------------------------------------
    @property
    def n_columns(self) -> int:
        return sum(f.n_columns for f in self.factors)

    def column_names(self, **options) -> list[str]:
        self.check_file_options(options)
        return [f"f{i}_{name}" for i, f in enumerate(self.factors) for name in f.column_names()]

    def from_rows(self, rows, **options):
        """Split an (n, Σ columns) table into the factors' columns (each in its default format)."""
        self.check_file_options(options)
        # cpu: rows read from a file are on the CPU
        rows = torch.as_tensor(rows, dtype=DTYPE)
        if rows.dim() != 2 or rows.shape[1] != self.n_columns:
            raise InputError(f"{self!r}: expected rows of {self.n_columns} columns, got shape {tuple(rows.shape)}",
                             field="data")
        out, j = [], 0
        for f in self.factors:
            out.append(rows[:, j:j + f.n_columns])
            j += f.n_columns
        return self.validate(tuple(o if isinstance(f, Manifold) else o.round().to(torch.int64)
                                   for f, o in zip(self.factors, out)))

    def to_rows(self, x, **options):
        self.check_file_options(options)
        return torch.cat([f.to_rows(xi).to(DTYPE) for f, xi in zip(self.factors, x)], dim=1)

    # ----- the clock and the forward process ----------------------------------------------------
    @property
    def time_range(self) -> tuple[float, float]:
        # the clock τ: 0 is every factor's t_min, 1 its t_max (the prior); training draws τ in [0, 1]
        return (0.0, 1.0)

    def factor_times(self, tau: torch.Tensor) -> list[torch.Tensor]:
        """t_i(τ) for every factor (module docstring)."""
        out = []
        for f, manifold in zip(self.factors, self.is_manifold):
            lo, hi = f.time_range
            out.append(lo * (hi / lo) ** tau if manifold else lo + tau * (hi - lo))
        return out

    def factor_time_rates(self, tau: torch.Tensor) -> list[torch.Tensor]:
        """dt_i/dτ for every factor."""
        out = []
        for f, manifold, t in zip(self.factors, self.is_manifold, self.factor_times(tau)):
            lo, hi = f.time_range
            out.append(t * math.log(hi / lo) if manifold else torch.full_like(tau, hi - lo))
        return out

    def _clock(self, tau, n: int, device) -> torch.Tensor:
        tau = torch.as_tensor(tau, dtype=DTYPE, device=device)
        bad = ~((tau >= 0) & (tau <= 1))
        if bool(bad.any()):
            raise InputError(f"{self!r}: the diffusion clock must lie in [0, 1], got {float(tau[bad].flatten()[0])}",
                             field="t")
        return tau.expand(n) if tau.dim() == 0 else tau.reshape(n)

    def sample_forward(self, x0, t, generator=None):
        """Exact draw of every factor at its time t_i(τ) (τ = ``t``, the clock in [0, 1])."""
        return self._sample_forward(x0, self._clock(t, self.n_points(x0), x0[0].device), generator)

    def log_kernel(self, xt, x0, t):
        """Σ_i log p_{t_i(τ)}(xt_i | x0_i), nats w.r.t. the product measure (τ = ``t``)."""
        return self._log_kernel(xt, x0, self._clock(t, self.n_points(x0), x0[0].device))

    def _sample_forward(self, x0, tau, generator):
        return tuple(f.sample_forward(xi, ti, generator) for f, xi, ti in zip(self.factors, x0, self.factor_times(tau)))

    def _log_kernel(self, xt, x0, tau):
        return sum(f.log_kernel(a, b, ti) for f, a, b, ti in zip(self.factors, xt, x0, self.factor_times(tau)))

    def prior_sample(self, n, generator=None):
        return tuple(f.prior_sample(n, generator) for f in self.factors)

    def prior_log_prob(self, x):
        return sum(f.prior_log_prob(xi) for f, xi in zip(self.factors, x))

    # ----- fixed factors ------------------------------------------------------------------------
    def given_part(self, given: dict, n: int) -> dict:
        """``given={factor index: factor point(s)}``: one point (broadcast) or one per sample, validated."""
        if not isinstance(given, dict) or not given:
            raise InputError(f"given: expected a non-empty dict {{factor: point(s)}}, got {given!r}", field="given")
        out = {}
        for i, value in given.items():
            if isinstance(i, bool) or not isinstance(i, int) or not 0 <= i < len(self.factors):
                raise InputError(f"given: factor {i!r} does not exist in {self!r} (factors 0 … "
                                 f"{len(self.factors) - 1})", field="given")
            f = self.factors[i]
            try:
                v = f.validate(value)
            except InputError as e:
                raise InputError(f"given: factor {i} ({f!r}): {e.message}", field="given") from None
            if v.shape[0] not in (1, n):
                raise InputError(f"given: factor {i} has {v.shape[0]} points; give one or one per sample ({n})",
                                 field="given")
            out[i] = v.expand(n, *v.shape[1:]).clone()
        if len(out) == len(self.factors):
            raise InputError("given: every factor is fixed; nothing is left to sample", field="given")
        return out
