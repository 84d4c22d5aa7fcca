"""Pictures of flat coordinates (R^d): a density heat map with the data drawn over it.

- d = 1: the density of the coordinate as a curve over a histogram of the data;
- d = 2: one map of the two coordinates;
- d ≥ 3: every pair of coordinates, as the lower triangle of a d × d grid of panels, with the 1-D
  density of each coordinate on the diagonal (one colour scale for all pairs).

R^d has no natural window, so each coordinate is drawn over the range of the data (else of the
samples): from its 0.5 % to its 99.5 % quantile, widened by 10 % of that span on each side.
Points outside the window are not drawn; the densities stay normalised over all points, so the
mass shown is the mass inside the window.

The density comes from one of (argument ``density``, the panel title says which):

- ``"model"``: exp(``model.log_prob``) at the centres of a ``grid`` × ``grid`` grid of cells of the
  window (probability-flow ODE, nats w.r.t. Lebesgue measure); d ≤ 2 only, since for d ≥ 3 a pair's
  density is a marginal that a grid of the joint law does not give, and with data or samples given
  (they set the window);
- ``"samples"`` / ``"data"``: a histogram of ``bins`` cells per coordinate over the window,
  normalised by the number of points and the cell size, smoothed by a Gaussian of ``smoothing``
  cells (standard deviation; ``scipy.ndimage.gaussian_filter`` with zero padding outside the window).

Densities are per unit of the coordinates (1/unit^k for k coordinates), the units of the data file.
"""

from __future__ import annotations

import numpy as np
import torch

from heatwalk.errors import InputError
from heatwalk.frontend.plots.figures import (
    COLOR_SCALE_OPTION, DATA_COLOUR, DENSITY_OPTION, MAX_POINTS_OPTION, OVERLAY_COLOUR, SAMPLES_COLOUR,
    density_cmap, log_prob_on, render, spread,
)
from heatwalk.frontend.plots.pairs import checked_inputs, density_caption, draw_pairs_layout, pairs_size
from heatwalk.spaces.base import Option

#: the options the command line offers (``columns`` follows the data file's columns)
OPTIONS = (
    DENSITY_OPTION,
    Option("grid", int, "cells per coordinate of the model's density grid (log_prob at grid^d points)", default=64,
           metavar="N"),
    Option("bins", int, "histogram bins per coordinate of a samples or data density", default=72, metavar="N"),
    Option("smoothing", float, "standard deviation (bins) of the Gaussian smoothing of a histogram", default=1.5,
           metavar="BINS"),
    COLOR_SCALE_OPTION,
    MAX_POINTS_OPTION,
)

#: quantiles of the window of each coordinate, and the margin added on each side (fraction of the span)
WINDOW_QUANTILES, WINDOW_MARGIN = (0.005, 0.995), 0.1


def shows_model_density(space) -> bool:
    """False: the window comes from point sets, so a model alone is drawn from its samples (with data or
    samples given, ``density="model"`` draws the model's own density for d ≤ 2)."""
    return False


def default_size(space) -> tuple[int, int]:
    return pairs_size(space.d)


def window(x: np.ndarray) -> np.ndarray:
    """(d, 2) lower and upper limits per coordinate of points x (m, d) (module docstring)."""
    lo, hi = np.quantile(x, WINDOW_QUANTILES, axis=0)
    span = np.where(hi > lo, hi - lo, np.maximum(np.abs(hi), 1.0))
    return np.stack([lo - WINDOW_MARGIN * span, hi + WINDOW_MARGIN * span], axis=1)


def histogram_density(x: np.ndarray, limits: np.ndarray, bins: int, smoothing: float) -> np.ndarray:
    """Smoothed histogram density (per unit^k) of points x (m, k), k = 1 or 2, over ``limits`` (k, 2):
    shape (bins,)*k, normalised by all m points (mass outside the window is not shown)."""
    edges = [np.linspace(lo, hi, bins + 1) for lo, hi in limits]
    counts, _ = np.histogramdd(x, bins=edges)
    cell = np.prod([(hi - lo) / bins for lo, hi in limits])
    density = counts / (x.shape[0] * cell)
    if smoothing > 0:
        from scipy.ndimage import gaussian_filter

        density = gaussian_filter(density, sigma=smoothing, mode="constant")
    return density


def model_density(model, limits: np.ndarray, grid: int) -> np.ndarray:
    """exp(model.log_prob) per unit^d at the centres of grid^d cells of the window ``limits`` (d = 1, 2)."""
    centres = [torch.as_tensor(lo + (np.arange(grid) + 0.5) * (hi - lo) / grid, dtype=torch.float64)
               for lo, hi in limits]
    mesh = torch.stack(torch.meshgrid(*centres, indexing="ij"), -1).reshape(-1, len(centres))
    return np.exp(log_prob_on(model, mesh)).reshape((grid,) * len(centres))


def draw_coordinates(fig, space, data, samples, *, model=None, density=None, columns=None, grid: int = 64,
                     bins: int = 72, smoothing: float = 1.5, color_scale: str = "linear",
                     max_points: int = 3000) -> None:
    """Draw the density of the coordinates with the data over it (see the module docstring)."""
    d = space.d
    data, samples, names, grid, bins, smoothing, source = checked_inputs(
        space, d, "coordinates", data, samples, model=model, density=density, columns=columns, grid=grid, bins=bins,
        smoothing=smoothing, color_scale=color_scale)
    if data is None and samples is None:
        raise InputError("the coordinates picture takes its window from data or samples: give one of them "
                         "(with a model alone, draw samples from it)", field="data")
    limits = window((data if data is not None else samples).numpy())
    pts = {"samples": samples, "data": data, "model": None}[source]

    def density_of(cols):
        if source == "model":
            return model_density(model, limits[cols], grid)
        return histogram_density(pts[:, cols].numpy(), limits[cols], bins, smoothing)

    how = density_caption(source, None if pts is None else pts.shape[0], grid, bins, smoothing, "coordinate")
    shown = None if data is None else data[torch.as_tensor(spread(data.shape[0], max_points))].numpy()
    draw_pairs_layout(
        fig, d, names, how=how, source=source, color_scale=color_scale, unit="unit", shown=shown,
        pair_density=density_of,
        one=lambda ax, i, caption, small: _one(ax, density_of([i]), limits[i], names[i], caption, data, i, source),
        pair=lambda ax, dens, cols, norm, small: _pair(ax, dens, limits, names, shown, cols, norm, small=small))


def _one(ax, dens: np.ndarray, limits, name: str, how: str, data, col: int, source: str) -> None:
    """A density curve (per unit) over the histogram of the data's coordinate ``col``."""
    k = dens.shape[0]
    lo, hi = limits
    centres = lo + (np.arange(k) + 0.5) * (hi - lo) / k
    if data is not None:
        ax.hist(data[:, col].numpy(), bins=48, range=(lo, hi), density=False, color=DATA_COLOUR, alpha=0.35,
                weights=np.full(data.shape[0], 48 / ((hi - lo) * data.shape[0])), label=f"data (n={data.shape[0]})")
    ax.plot(centres, dens, color=SAMPLES_COLOUR, lw=2, label=f"{source} density")
    ax.set_xlim(lo, hi)
    ax.set_xlabel(name)
    ax.set_ylabel("density (1/unit)")
    ax.set_ylim(bottom=0)
    ax.set_title(how, fontsize="small")
    ax.legend(loc="upper right", fontsize="small")


def _pair(ax, dens: np.ndarray, limits, names, shown, cols, norm, small: bool = False):
    """Heat map of a pair's density (per unit²; x = first coordinate) with the data drawn over it."""
    (x0, x1), (y0, y1) = limits[cols[0]], limits[cols[1]]
    im = ax.imshow(dens.T, origin="lower", extent=[x0, x1, y0, y1], cmap=density_cmap(), norm=norm,
                   interpolation="nearest", aspect="auto")
    if shown is not None:
        size = (4.0 if shown.shape[0] < 1000 else 1.5) * (0.5 if small else 1.0)
        ax.scatter(shown[:, cols[0]], shown[:, cols[1]], s=size, lw=0, alpha=0.5, color=OVERLAY_COLOUR,
                   label=f"data ({shown.shape[0]} shown)")
        ax.legend(loc="upper right", fontsize="x-small", markerscale=3, framealpha=0.7)
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    ax.set_xlabel(names[cols[0]])
    ax.set_ylabel(names[cols[1]])
    return im


def plot_coordinates(space, data=None, samples=None, *, model=None, size=None, dpi: int = 100, title: str = "",
                     **options):
    """A Figure of the density of points of R^d with the data over it (module docstring).

    Options: ``density`` ("model", "samples" or "data"; default samples if given, else the model, else
    the data), ``columns`` (d names for the axes), ``grid``, ``bins``, ``smoothing`` (cells),
    ``color_scale`` ("linear" or "log"), ``max_points`` (data points drawn). ``size`` in pixels.
    """
    return render("coordinates", draw_coordinates, default_size, space, data, samples, model, size, dpi, title,
                  options)
