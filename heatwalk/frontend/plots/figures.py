"""What every picture shares: figures of a stated pixel size, saving by extension, checks of the arguments.

A picture is drawn by a *draw function* ``draw(fig, space, data, samples, *, model=None, **options)``
that fills a matplotlib ``Figure`` (or a ``SubFigure``, so that a product space can give each factor
its own part of one figure). :func:`render` checks the options against the draw function's
keywords, builds a figure of the requested size in pixels and calls it.

Figures are built with ``matplotlib.figure.Figure`` directly (not pyplot): nothing global is
changed, no window is opened, and a figure is freed when it is no longer referenced.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import torch

from heatwalk.checks import check_choice, check_int, check_positive_int
from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path
from heatwalk.spaces.base import Option

#: file extensions save_figure writes, and matplotlib's name of each format
FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}
#: where a heat map's density comes from
DENSITY_SOURCES = ("model", "samples", "data")
#: the colour of data points and bars, and of samples, in every picture
DATA_COLOUR, SAMPLES_COLOUR, REFERENCE_COLOUR = "tab:blue", "tab:orange", "black"
#: data points drawn over a heat map, and the heat maps' colour map (light = low density)
OVERLAY_COLOUR, DENSITY_CMAP = "tab:red", "YlGnBu"


def new_figure(size, dpi: int = 100):
    """An empty figure of ``size`` = (width, height) pixels at ``dpi`` dots per inch (constrained layout)."""
    from matplotlib.figure import Figure

    if not isinstance(size, (tuple, list)) or len(size) != 2:
        raise InputError(f"size must be (width, height) in pixels, got {size!r}", field="size")
    width = check_int("size: width (pixels)", size[0], minimum=50)
    height = check_int("size: height (pixels)", size[1], minimum=50)
    dpi = check_positive_int("dpi", dpi)
    return Figure(figsize=(width / dpi, height / dpi), dpi=dpi, layout="constrained")


def save_figure(fig, path, *, overwrite: bool = False) -> Path:
    """Write ``fig`` to ``path`` as PNG, SVG or PDF (chosen by the extension), atomically.

    The file is written under a temporary name beside ``path`` and renamed, so a failed write leaves
    nothing. A PNG has the figure's size in pixels (``figsize * dpi``). An existing file is replaced
    only with ``overwrite=True``. Raises :class:`InputError` for any other extension.
    """
    path = Path(path)
    fmt = FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise InputError(f"{path}: unknown picture format {path.suffix or '(no extension)'!r}; expected one of "
                         f"{', '.join(FORMATS)}", field="path")
    with atomic_path(path, overwrite=overwrite) as tmp:
        fig.savefig(tmp, format=fmt, dpi=fig.dpi)
    return path


def render(kind: str, draw, default_size, space, data, samples, model, size, dpi, title, options) -> object:
    """Check ``space.plot_kind`` and ``options``, build the figure, draw, give it its title; returns the Figure."""
    if getattr(space, "plot_kind", None) != kind:
        raise InputError(f"{space!r} declares the picture {getattr(space, 'plot_kind', None)!r}, not {kind!r}; "
                         f"use heatwalk.frontend.plots.plot, which picks the space's own", field="space")
    check_options(kind, draw, options)
    if data is None and samples is None and model is None:
        raise InputError("nothing to draw: give data, samples or a model", field="data")
    fig = new_figure(default_size(space) if size is None else size, dpi)
    draw(fig, space, data, samples, model=model, **options)
    if title:
        fig.suptitle(title)
    return fig


def option_names(draw) -> list[str]:
    """The keyword options a draw function takes (besides ``model``)."""
    params = inspect.signature(draw).parameters.values()
    return [p.name for p in params if p.kind is inspect.Parameter.KEYWORD_ONLY and p.name != "model"]


def check_options(kind: str, draw, options: dict) -> None:
    """Refuse options the picture does not take, naming the ones it does."""
    known = option_names(draw)
    unknown = sorted(set(options) - set(known))
    if unknown:
        raise InputError(f"the {kind!r} picture takes no option {', '.join(map(repr, unknown))}; its options: "
                         f"{', '.join(known) or 'none'}", field=unknown[0])


def choose_density(density, *, data, samples, model, model_ok: bool = True, why: str = "") -> str:
    """Where a heat map's density comes from.

    ``density`` None picks "samples" when samples are given, else "model" when a model is given and
    the picture can draw the model's density (``model_ok``), else "data". An explicit choice whose
    source is missing (or "model" where ``model_ok`` is False, for the reason ``why``) is an error.
    The pictures say in their titles which one they show.
    """
    if density is None:
        if samples is not None:
            return "samples"
        if model is not None and model_ok:
            return "model"
        return "data"
    check_choice("density", density, DENSITY_SOURCES)
    given = {"model": model, "samples": samples, "data": data}[density]
    if density == "model" and not model_ok:
        raise InputError(f"density='model' is not available here: {why}; use density='samples' or 'data'",
                         field="density")
    if given is None:
        raise InputError(f"density={density!r} needs {'a model' if density == 'model' else density}, "
                         f"but none was given", field="density")
    return density


def check_names(columns, n: int, default: list[str], what: str) -> list[str]:
    """``columns`` as n names (strings), or ``default``; InputError if the count or a type is wrong."""
    if columns is None:
        return list(default)
    if isinstance(columns, str) or len(columns) != n:
        got = repr(columns) if isinstance(columns, str) else f"{len(columns)} names"
        raise InputError(f"columns: expected {n} names of the {what}, got {got}", field="columns")
    for i, c in enumerate(columns):
        if not isinstance(c, str) or not c:
            raise InputError(f"columns: name {i} must be a non-empty string, got {c!r}", field="columns")
    return list(columns)


def points(space, x, what: str):
    """``x`` validated on ``space`` (None stays None); errors name the argument."""
    if x is None:
        return None
    try:
        return space.validate(x)
    except InputError as e:
        raise InputError(f"{what}: {e.message}", row=e.row, field=what) from None


def spread(n: int, max_points: int) -> np.ndarray:
    """At most ``max_points`` indices spread evenly over range(n) (deterministic; keeps sorted data fair)."""
    max_points = check_positive_int("max_points", max_points)
    if n <= max_points:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, max_points).round().astype(np.int64))


def log_prob_on(model, grid: torch.Tensor) -> np.ndarray:
    """The model's log-likelihood (nats) at every grid point, from ``model.log_prob`` (probability-flow ODE)."""
    out = model.log_prob(grid)
    return out["log_prob"].detach().cpu().numpy().astype(np.float64)


def check_model_space(model, space) -> None:
    if model is not None and not space.holds_fit_of(model.space):
        raise InputError(f"model: fitted on {model.space!r}, but the picture is of {space!r}", field="model")


def never(space) -> bool:
    return False


@dataclass(frozen=True)
class Picture:
    """A kind of picture: its draw function, its default size in pixels for a space, and its declarations.

    ``options``: the draw function's options that the command line offers (``heatwalk plot`` builds
    one flag per name, as for the spaces' options), as :class:`heatwalk.spaces.Option` objects.
    ``model_density(space)``: whether the picture can show a model's own density (``density="model"``,
    from ``log_prob`` on a grid) for ``space``; where it cannot, ``heatwalk plot`` draws samples from
    the model instead.
    """

    draw: Callable
    default_size: Callable
    options: tuple = ()
    model_density: Callable = never


#: colour scales of the density heat maps
COLOR_SCALES = ("linear", "log")

# options several pictures share (each picture lists the ones it takes in its module's OPTIONS)
DENSITY_OPTION = Option("density", str, "where the heat map's density comes from (default: samples if given, else "
                        "the model, else the data)", choices=DENSITY_SOURCES)
COLOR_SCALE_OPTION = Option("color_scale", str, "colour scale of the density: linear, or log (four decades "
                            "below the peak)", default="linear", choices=COLOR_SCALES)
MAX_POINTS_OPTION = Option("max_points", int, "data points drawn (spread evenly over the file)", default=3000,
                           metavar="N")
#: a logarithmic colour scale spans at most this ratio below its largest value
LOG_RANGE = 1e4


def density_norm(color_scale: str, largest: float):
    """The colour normalisation of a density heat map whose largest value is ``largest``.

    "linear": 0 … largest. "log": largest / 1e4 … largest on a logarithmic scale (cells below, zero
    ones included, take the lowest colour), so that tails and ridges a few decades below the peak show.
    """
    from matplotlib.colors import LogNorm, Normalize

    check_choice("color_scale", color_scale, COLOR_SCALES)
    top = largest if largest > 0 else 1.0
    if color_scale == "linear":
        return Normalize(0.0, top)
    return LogNorm(top / LOG_RANGE, top, clip=True)


def density_cmap():
    """The heat maps' colour map, with cells a logarithmic scale cannot show (density 0) in its lowest colour."""
    import matplotlib

    cmap = matplotlib.colormaps[DENSITY_CMAP]
    return cmap.with_extremes(bad=cmap(0.0), under=cmap(0.0))
