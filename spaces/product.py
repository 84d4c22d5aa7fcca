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

Tables
------
A table row holds the factors' columns side by side, in factor order. Read
from a table (``from_table``, what ``heatwalk fit --space product`` does), the
factors are named by the reading option ``factors``, a text
``KIND:N[:SETTING…],KIND:N[:SETTING…],…`` that gives each factor's space kind,
its number of columns in column order and, optionally, reading options for that
factor alone (``NAME=VALUE``, or ``NAME`` for a switch): ``torus:2,euclidean:3``
is two angles then three coordinates; ``torus:2:degrees,so3:4:rotation_format=
quaternion:quaternion_order=wxyz`` is two angles in degrees then quaternions.
Each factor is built from its columns as that space builds itself from a table
of its own. A reading option given beside ``factors`` (the union of the table
spaces' ``file_options``) goes to every factor that declares it — ``degrees=True``
reads the torus's angles and SO(3) rotation vectors in degrees — unless the
factor's own setting in ``factors`` says otherwise; one that no factor takes is
refused. ``factors`` is kept with the model's reading options, so samples are
written in the units they were read in.

A ``categories:N`` factor is N columns of named states (text cells: a residue
name, a class), one sequence position per column: its states are the distinct
names in those columns (sorted; numerically when all are integers), saved with
the model as the factor's ``state_names``, so samples are written with the same
names and a value to fix is given by name. It takes no reading options. Its
columns are declared by :meth:`Product.table_text_columns` and their cells reach
:meth:`Product.from_table` as ``text``; in the rows of :meth:`Product.from_rows`
and :meth:`Product.to_rows` they hold the state codes (indices into
``state_names``), which the table readers and writers turn from and into names
(:meth:`Product.column_states`).
"""

from __future__ import annotations

import math
from typing import ClassVar

import torch

from heatwalk.errors import InputError
from heatwalk.spaces.base import DTYPE, Option, Space
from heatwalk.spaces.finite import FiniteStateSpace
from heatwalk.spaces.manifold import Manifold


class Product(Space):
    """The product of ``factors`` (any mix of manifolds and finite state spaces); see the module docstring."""

    kind = "product"
    plot_kind = "factors"
    reference_measure = "the product of the factors' measures"
    objective_name: ClassVar[str] = "product"
    max_time: ClassVar[float] = 1.0
    #: ``factors`` (:data:`FACTORS_OPTION`) and the union of the table spaces' reading options, each passed to
    #: the factors that declare it (set by heatwalk.spaces from its registry: :func:`table_factor_options`)
    file_options: ClassVar[tuple[Option, ...]] = ()

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
        # bounded features when every manifold factor's are (a finite factor's one-hot codes are bounded)
        self.bounded_embedding = all(f.bounded_embedding for f, m in zip(factors, self.is_manifold) if m)

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
        return frozenset({"factors"})

    # ----- batches of tuples --------------------------------------------------------------------
    def n_points(self, x) -> int:
        return int(x[0].shape[0])

    def take(self, x, index):
        return tuple(xi[index] for xi in x)

    def fitted_to(self, x) -> "Product":
        """Every factor fitted to its part of the points (:meth:`Space.fitted_to`)."""
        factors = [f.fitted_to(xi) for f, xi in zip(self.factors, x)]
        return self if all(a is b for a, b in zip(factors, self.factors)) else Product(*factors)

    def holds_fit_of(self, fitted) -> bool:
        return (isinstance(fitted, Product) and len(fitted.factors) == len(self.factors)
                and all(a.holds_fit_of(b) for a, b in zip(self.factors, fitted.factors)))

    def concat(self, batches):
        return tuple(torch.cat([b[i] for b in batches], 0) for i in range(len(self.factors)))

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
    @classmethod
    def table_text_columns(cls, *, factors: str | None = None, **options) -> tuple[int, ...]:
        """The columns (0-based, in factor order) of the named-state factors of ``factors`` (module docstring)."""
        from heatwalk.spaces import SPACE_KINDS

        out, j = [], 0
        for kind, n, _ in parse_factor_spec(factors):
            if SPACE_KINDS[kind].table_states:
                out += range(j, j + n)
            j += n
        return tuple(out)

    @classmethod
    def from_table(cls, n_columns: int, *, factors: str | None = None, text: dict | None = None,
                   **options) -> "Product":
        """The product named by ``factors`` (``KIND:N[:SETTING…],…``, module docstring) whose columns fill
        ``n_columns``; each factor is built by its class's ``from_table`` from its N columns and its reading
        options, a named-state factor by ``from_named_columns`` from its columns' cells in ``text``
        ({column: cells}, the columns of :meth:`table_text_columns`)."""
        from heatwalk.spaces import SPACE_KINDS

        cls.check_file_options(options)
        spec = parse_factor_spec(factors)
        total = sum(n for _, n, _ in spec)
        if total != n_columns:
            raise InputError(f"factors {factors!r} take {total} columns, but the table has {n_columns} data "
                             f"columns (choose them, in factor order, with --columns)", field="factors")
        text = text or {}
        built, j = [], 0
        for i, (kind, n, own) in enumerate(spec):
            factor_cls = SPACE_KINDS[kind]
            opts = _options_for(factor_cls, options) | own
            where = f"factors: factor {i} ({kind}:{n}, table columns {j + 1}–{j + n})"
            if factor_cls.table_states:
                missing = [c + 1 for c in range(j, j + n) if c not in text]
                if missing:
                    raise InputError(f"{where}: the cells of columns {missing} were not read as text (read the "
                                     f"table with the columns of Product.table_text_columns as text)",
                                     field="factors")
                try:
                    built.append(factor_cls.from_named_columns([text[c] for c in range(j, j + n)]))
                except InputError as e:
                    raise InputError(f"{where}: {e.message}", field="factors") from None
                j += n
                continue
            try:
                f = factor_cls.from_table(n, **opts)
                reads = f.n_columns_for(**opts)
            except InputError as e:
                raise InputError(f"{where}: {e.message}{_shared_hint(options, own, e)}", field="factors") from None
            if reads != n:
                read_with = ", ".join(f"{k}={v!r}" for k, v in opts.items()) or "its default reading options"
                raise InputError(f"{where}: {f!r} read with {read_with} takes {reads} columns, not {n}",
                                 field="factors")
            built.append(f)
            j += n
        unused = sorted(set(options) - {o.name for f in built for o in type(f).file_options})
        if unused:
            raise InputError(f"factors {factors!r}: no factor takes the reading option {unused[0]!r}",
                             field=unused[0])
        return cls(*built)

    def factor_options(self, options: dict) -> list[dict]:
        """The reading options of each factor: those of ``options`` its class declares, updated by its own
        settings in ``options["factors"]`` when given (which must name this product's factors). An option that
        no factor of this product takes is refused."""
        type(self).check_file_options(options)
        options = dict(options)
        spec = options.pop("factors", None)
        out = [_options_for(type(f), options) for f in self.factors]
        unused = sorted(set(options) - {k for o in out for k in o})
        if unused:
            raise InputError(f"{self!r}: no factor takes the reading option {unused[0]!r}", field=unused[0])
        if spec is not None:
            items = parse_factor_spec(spec)
            kinds = [k for k, _, _ in items]
            if kinds != [f.kind for f in self.factors]:
                raise InputError(f"factors {spec!r} name the factors {', '.join(kinds)}, but the space is {self!r}",
                                 field="factors")
            out = [o | own for o, (_, _, own) in zip(out, items)]
        return out

    @property
    def n_columns(self) -> int:
        return sum(f.n_columns for f in self.factors)

    def column_names(self, **options) -> list[str]:
        """``f{i}_{name}`` for each factor i's column names (read with the options it takes)."""
        return [f"f{i}_{name}" for i, (f, o) in enumerate(zip(self.factors, self.factor_options(options)))
                for name in f.column_names(**o)]

    def column_states(self, **options) -> dict[int, tuple[str, ...]]:
        """The named-state columns of every factor (:meth:`Space.column_states`), at their places in the row."""
        return {span.start + c: names
                for f, o, span in zip(self.factors, self.factor_options(options), self.factor_columns(**options))
                for c, names in f.column_states(**o).items()}

    def factor_columns(self, **options) -> list[range]:
        """The table columns of each factor (0-based, in row order) when read with ``options``."""
        out, j = [], 0
        for f, o in zip(self.factors, self.factor_options(options)):
            n = f.n_columns_for(**o)
            out.append(range(j, j + n))
            j += n
        return out

    def from_rows(self, rows, **options):
        """Split an (n, Σ columns) table into the factors' columns, each read by its factor with the options it
        takes (finite factors: integer state codes)."""
        per_factor = self.factor_options(options)
        spans = self.factor_columns(**options)
        # cpu: rows read from a file are on the CPU
        rows = torch.as_tensor(rows, dtype=DTYPE)
        if rows.dim() != 2 or rows.shape[1] != spans[-1].stop:
            raise InputError(f"{self!r}: expected rows of {spans[-1].stop} columns, got shape {tuple(rows.shape)}",
                             field="data")
        out = []
        for i, (f, o, span) in enumerate(zip(self.factors, per_factor, spans)):
            part = rows[:, span.start:span.stop]
            try:
                out.append(f.from_rows(part if isinstance(f, Manifold) else part.round().to(torch.int64), **o))
            except InputError as e:
                raise _in_row_terms(e, i, f, span.start) from None
        return self.validate(tuple(out))

    def to_rows(self, x, **options):
        return torch.cat([f.to_rows(xi, **o).to(DTYPE)
                          for f, xi, o in zip(self.factors, x, self.factor_options(options))], dim=1)

    def given_from_columns(self, index: list[int], values: torch.Tensor, names=None, **options) -> dict:
        """``given`` by factor from values of table columns ``index`` (n, len(index)), in the file's units: a
        factor is fixed when all its columns are given; some but not all of a factor's columns is an error
        (a factor of a product is fixed whole) naming the columns by ``names`` (all the table's column names)
        when given, else by position (1-based)."""
        def called(columns):
            return ", ".join(names[c] for c in columns) if names else str([c + 1 for c in columns])

        where = dict(zip(index, range(len(index))))
        given = {}
        for i, (f, o, span) in enumerate(zip(self.factors, self.factor_options(options),
                                             self.factor_columns(**options))):
            have = [c for c in span if c in where]
            if not have:
                continue
            if len(have) != len(span):
                missing = [c for c in span if c not in where]
                raise InputError(f"factor {i} ({f!r}) is fixed whole: give all of its columns, {called(span)} "
                                 f"(missing {called(missing)})", field="fix")
            part = values[:, [where[c] for c in span]]
            try:
                given[i] = f.from_rows(part if isinstance(f, Manifold) else part.round().to(torch.int64), **o)
            except InputError as e:
                raise _in_row_terms(e, i, f, span.start) from None
        return given

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


def _in_row_terms(error: InputError, i: int, factor, start: int) -> InputError:
    """Factor i's error about row r, column j of its own columns, as one about column start + j of the
    product's rows (the factor named after the place, so a table reader can name the column)."""
    if error.field is not None and error.field.isdigit() and error.row is not None:
        j = int(error.field)
        message = error.message.replace(f"row {error.row}, column {j}: ", "", 1)
        return InputError(f"row {error.row}, column {start + j}: factor {i} ({factor!r}): {message}", row=error.row,
                          field=str(start + j))
    return InputError(f"factor {i} ({factor!r}): {error.message}", row=error.row, field=error.field)


def parse_factor_spec(text) -> list[tuple[str, int, dict]]:
    """``"KIND:N[:SETTING…],…"`` -> [(kind, N, {option: value}), …] (module docstring): at least two factors, each
    a space read from tables of numbers (not a finite space, not a product), N ≥ 1 columns, and settings among
    the reading options its space declares (``NAME=VALUE``, or ``NAME`` for a switch)."""
    from heatwalk.spaces import SPACE_KINDS

    table_kinds = sorted(k for k, c in SPACE_KINDS.items()
                         if (c.file_kind == "table" or c.table_states) and not issubclass(c, Product))
    example = ("e.g. torus:2,euclidean:3, torus:2:degrees,categories:1 or "
               "torus:2:degrees,so3:4:rotation_format=quaternion:quaternion_order=wxyz")
    if not isinstance(text, str) or not text.strip():
        raise InputError(f"a product read from a table needs factors=KIND:N,KIND:N,… (its factors in column order, "
                         f"{example}; kinds: {', '.join(table_kinds)})", field="factors")
    out = []
    for k, item in enumerate(text.split(",")):
        kind, count, *settings = [p.strip() for p in item.split(":")] + ([""] if ":" not in item else [])
        if not kind or not count:
            raise InputError(f"factors {text!r}: item {k + 1} {item.strip()!r} is not KIND:N ({example})",
                             field="factors")
        if kind not in SPACE_KINDS:
            raise InputError(f"factors {text!r}: unknown space {kind!r} (kinds: {', '.join(table_kinds)})",
                             field="factors")
        if kind not in table_kinds:
            raise InputError(f"factors {text!r}: a {kind} factor is not read from a table (kinds: "
                             f"{', '.join(table_kinds)})", field="factors")
        if not count.isdigit() or int(count) < 1:
            raise InputError(f"factors {text!r}: item {k + 1} needs a column count N ≥ 1, got {count!r}",
                             field="factors")
        where = f"factors {text!r}: item {k + 1}"
        if SPACE_KINDS[kind].table_states and any(settings):
            raise InputError(f"{where}: a {kind} factor takes no reading options (its columns hold state names; "
                             f"got {':'.join(settings)!r})", field="factors")
        out.append((kind, int(count), {} if SPACE_KINDS[kind].table_states else
                    _settings(SPACE_KINDS[kind], settings, where)))
    if len(out) < 2:
        raise InputError(f"factors {text!r}: a product needs at least two factors ({example}); for one space "
                         f"use --space {out[0][0]}", field="factors")
    return out


def _settings(space_cls, settings: list[str], where: str) -> dict:
    """{option: value} of ``NAME=VALUE`` / ``NAME`` settings, typed by the options ``space_cls`` declares."""
    declared = {o.name: o for o in space_cls.file_options}
    out = {}
    for text in settings:
        name, eq, value = (p.strip() for p in text.partition("="))
        if name not in declared:
            takes = ", ".join(declared) or "none"
            raise InputError(f"{where}: {space_cls.kind} takes no reading option {name!r} (its options: {takes})",
                             field="factors")
        opt = declared[name]
        if opt.kind is bool:
            if eq and value.lower() not in ("true", "false"):
                raise InputError(f"{where}: {name} is a switch: write {name} or {name}=true/false, got {text!r}",
                                 field="factors")
            out[name] = (not eq) or value.lower() == "true"
            continue
        if not eq or not value:
            raise InputError(f"{where}: {name} needs a value: {name}=VALUE", field="factors")
        try:
            typed = opt.kind(value)
        except ValueError:
            raise InputError(f"{where}: {name}={value!r} is not a {opt.kind.__name__}", field="factors") from None
        if opt.choices is not None and typed not in opt.choices:
            raise InputError(f"{where}: {name}={value!r}: expected one of {', '.join(map(str, opt.choices))}",
                             field="factors")
        out[name] = typed
    return out


def _shared_hint(options: dict, own: dict, error: InputError) -> str:
    """Advice when a factor refused a reading option that was given for every factor."""
    shared = sorted(k for k in options if k not in own and k in error.message)
    if not shared:
        return ""
    return (f" ({shared[0]} was given for every factor that takes it; give it to one factor alone in factors, "
            f"e.g. torus:2:{shared[0]})")


def _options_for(space_cls, options: dict) -> dict:
    declared = {o.name for o in space_cls.file_options}
    return {k: v for k, v in options.items() if k in declared}


def table_factor_options(space_classes) -> tuple[Option, ...]:
    """The union of the reading options of ``space_classes`` (first declaration of each name), each with its
    help saying that it goes to the factors that take it: the ``file_options`` of :class:`Product`."""
    import dataclasses

    seen: dict[str, list] = {}
    for c in space_classes:
        if c.file_kind != "table" or issubclass(c, Product):
            continue
        for o in c.file_options:
            seen.setdefault(o.name, [o, []])[1].append(c.kind)
    return (FACTORS_OPTION, *(dataclasses.replace(o, help=f"to the {'/'.join(kinds)} factors: {o.help}", default=None)
                              for o, kinds in seen.values()))


#: the reading option naming a product's factors (module docstring)
FACTORS_OPTION = Option(
    "factors", str, "the factors in column order, KIND:N with N the factor's columns, and optionally its own "
    "reading options: KIND:N[:NAME=VALUE|:NAME],… (e.g. torus:2:degrees,euclidean:3; categories:N is N columns of "
    "named states, e.g. residue names)", metavar="KIND:N,...")
