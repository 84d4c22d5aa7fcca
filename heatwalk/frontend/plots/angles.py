"""Pictures of angles (the torus T^n): a density heat map with the data drawn over it.

- n = 1: the density of the angle as a curve over a histogram of the data;
- n = 2: one map of the two angles, e.g. the (phi, psi) map of protein backbones, in degrees on
  [-180, 180]² by default;
- n ≥ 3: every pair of angles, as the lower triangle of an n × n grid of panels, with the 1-D
  density of each angle on the diagonal (one colour scale for all pairs).

The density comes from one of (argument ``density``, the panel title says which):

- ``"model"``: exp(``model.log_prob``) at the centres of a ``grid`` × ``grid`` grid of cells
  (probability-flow ODE, nats w.r.t. arc length per angle); n ≤ 2 only, since for n ≥ 3 a pair's
  density is a marginal that a grid of the joint law does not give;
- ``"samples"`` / ``"data"``: a histogram of ``bins`` cells per angle, normalised to a density and
  smoothed by a Gaussian of ``smoothing`` cells (standard deviation) that wraps around at ±180°
  (``scipy.ndimage.gaussian_filter``, mode "wrap", so the total mass stays 1).

Densities are shown per unit of the axes: 1/deg^k with ``degrees=True`` (density per rad^k times
(π/180)^k), else 1/rad^k. Points are always given in radians (heatwalk's convention); ``degrees``
only chooses the units of the picture.
"""

from __future__ import annotations

import math

import numpy as np
import torch

from heatwalk.frontend.plots.figures import (
    COLOR_SCALE_OPTION, DATA_COLOUR, DENSITY_OPTION, MAX_POINTS_OPTION, OVERLAY_COLOUR, SAMPLES_COLOUR,
    density_cmap, log_prob_on, render, spread,
)
from heatwalk.frontend.plots.pairs import checked_inputs, density_caption, draw_pairs_layout, pairs_size
from heatwalk.spaces.base import Option

_RADIAN_TICKS = ([-math.pi, -math.pi / 2, 0.0, math.pi / 2, math.pi], ["−π", "−π/2", "0", "π/2", "π"])


#: the options the command line offers (``columns`` and ``degrees`` follow the data file's columns and units)
OPTIONS = (
    DENSITY_OPTION,
    Option("grid", int, "cells per angle of the model's density grid (log_prob at grid^n points)", default=64,
           metavar="N"),
    Option("bins", int, "histogram bins per angle of a samples or data density", default=72, metavar="N"),
    Option("smoothing", float, "standard deviation (bins) of the wrapped Gaussian smoothing of a histogram",
           default=1.5, metavar="BINS"),
    COLOR_SCALE_OPTION,
    MAX_POINTS_OPTION,
)


def shows_model_density(space) -> bool:
    """A grid of the joint law gives the density of one or two angles, not a pair's marginal for n ≥ 3."""
    return space.n <= 2


def default_size(space) -> tuple[int, int]:
    return pairs_size(space.n)


class _Units:
    """Degrees or radians: the factor from radians, the name, and the axis limits and ticks."""

    def __init__(self, degrees: bool):
        self.degrees = bool(degrees)
        self.scale = 180.0 / math.pi if degrees else 1.0
        self.name = "deg" if degrees else "rad"
        self.lim = (-180.0, 180.0) if degrees else (-math.pi, math.pi)

    def axis(self, ax, which: str, label: str, sparse: bool = False) -> None:
        """Limits, ticks (every 90° or π/2; only -180, 0, 180 when ``sparse``) and the label with its unit."""
        set_lim, set_ticks, set_label = ((ax.set_xlim, ax.set_xticks, ax.set_xlabel) if which == "x"
                                         else (ax.set_ylim, ax.set_yticks, ax.set_ylabel))
        set_lim(*self.lim)
        every = slice(None, None, 2) if sparse else slice(None)
        if self.degrees:
            set_ticks([-180, -90, 0, 90, 180][every])
        else:
            set_ticks(_RADIAN_TICKS[0][every], _RADIAN_TICKS[1][every])
        set_label(f"{label} ({self.name})")


def histogram_density(x: np.ndarray, bins: int, smoothing: float) -> np.ndarray:
    """Smoothed histogram density (per rad^k) of angles x (m, k), k = 1 or 2, on [-π, π)^k: shape (bins,)*k."""
    edges = np.linspace(-math.pi, math.pi, bins + 1)
    counts, _ = np.histogramdd(x, bins=[edges] * x.shape[1])
    density = counts / (x.shape[0] * (2 * math.pi / bins) ** x.shape[1])
    if smoothing > 0:
        from scipy.ndimage import gaussian_filter

        density = gaussian_filter(density, sigma=smoothing, mode="wrap")
    return density


def model_density(model, n: int, grid: int) -> np.ndarray:
    """exp(model.log_prob) per rad^n at the centres of grid^n cells of [-π, π)^n (n = 1, 2): shape (grid,)*n."""
    centres = -math.pi + (torch.arange(grid, dtype=torch.float64) + 0.5) * (2 * math.pi / grid)
    mesh = torch.stack(torch.meshgrid(*[centres] * n, indexing="ij"), -1).reshape(-1, n)
    return np.exp(log_prob_on(model, mesh)).reshape((grid,) * n)


def draw_angles(fig, space, data, samples, *, model=None, density=None, columns=None, degrees: bool = True,
                grid: int = 64, bins: int = 72, smoothing: float = 1.5, color_scale: str = "linear",
                max_points: int = 3000) -> None:
    """Draw the density of the angles with the data over it (see the module docstring)."""
    n = space.n
    data, samples, names, grid, bins, smoothing, source = checked_inputs(
        space, n, "angles", data, samples, model=model, density=density, columns=columns, grid=grid, bins=bins,
        smoothing=smoothing, color_scale=color_scale)
    units = _Units(degrees)
    pts = {"samples": samples, "data": data, "model": None}[source]

    def density_of(cols):
        if source == "model":
            return model_density(model, len(cols), grid)
        return histogram_density(pts[:, cols].numpy(), bins, smoothing)

    how = density_caption(source, None if pts is None else pts.shape[0], grid, bins, smoothing, "angle")
    shown = None if data is None else data[torch.as_tensor(spread(data.shape[0], max_points))].numpy() * units.scale
    draw_pairs_layout(
        fig, n, names, how=how, source=source, color_scale=color_scale, unit=units.name, scale=units.scale,
        shown=shown, pair_density=density_of,
        one=lambda ax, i, caption, small: _one_angle(ax, density_of([i]), units, names[i], caption, data, i, source,
                                                     sparse=small),
        pair=lambda ax, dens, cols, norm, small: _pair(ax, dens, units, names, shown, cols, norm, small=small))


def _one_angle(ax, dens: np.ndarray, units: _Units, name: str, how: str, data, col: int, source: str,
               sparse: bool = False) -> None:
    """A density curve (per unit) over the histogram of the data's angle ``col``."""
    k = dens.shape[0]
    centres = (-math.pi + (np.arange(k) + 0.5) * 2 * math.pi / k) * units.scale
    if data is not None:
        ax.hist(data[:, col].numpy() * units.scale, bins=48, range=units.lim, density=True, color=DATA_COLOUR,
                alpha=0.35, label=f"data (n={data.shape[0]})")
    ax.plot(centres, dens / units.scale, color=SAMPLES_COLOUR, lw=2, label=f"{source} density")
    units.axis(ax, "x", name, sparse=sparse)
    ax.set_ylabel(f"density (1/{units.name})")
    ax.set_ylim(bottom=0)
    ax.set_title(how, fontsize="small")
    ax.legend(loc="upper right", fontsize="small")


def _pair(ax, dens: np.ndarray, units: _Units, names, shown, cols, norm, small: bool = False):
    """Heat map of a pair's density (per unit²; x = first angle) with the data drawn over it."""
    extent = [*units.lim, *units.lim]
    im = ax.imshow(dens.T / units.scale ** 2, origin="lower", extent=extent, cmap=density_cmap(), norm=norm,
                   interpolation="nearest", aspect="equal")
    if shown is not None:
        size = (4.0 if shown.shape[0] < 1000 else 1.5) * (0.5 if small else 1.0)
        ax.scatter(shown[:, cols[0]], shown[:, cols[1]], s=size, lw=0, alpha=0.5, color=OVERLAY_COLOUR,
                   label=f"data ({shown.shape[0]} shown)")
        ax.legend(loc="upper right", fontsize="x-small", markerscale=3, framealpha=0.7)
    units.axis(ax, "x", names[cols[0]], sparse=small)
    units.axis(ax, "y", names[cols[1]], sparse=small)
    return im


def plot_angles(space, data=None, samples=None, *, model=None, size=None, dpi: int = 100, title: str = "",
                **options):
    """A Figure of the density of angles on a torus with the data over it (module docstring).

    Options: ``density`` ("model", "samples" or "data"; default samples if given, else the model, else
    the data), ``columns`` (n names for the axes), ``degrees`` (default True), ``grid``, ``bins``,
    ``smoothing`` (cells), ``color_scale`` ("linear" or "log": four decades below the peak),
    ``max_points`` (data points drawn). ``size`` in pixels.
    """
    return render("angles", draw_angles, default_size, space, data, samples, model, size, dpi, title, options)
