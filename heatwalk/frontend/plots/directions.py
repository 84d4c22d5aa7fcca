"""Pictures of directions (the sphere S²): an equal-area map of the density with the data drawn over it.

The map is matplotlib's Mollweide (default) or Hammer projection, both equal-area, of longitude
λ = atan2(y, x) ∈ (-180°, 180°] and latitude φ = asin(z) ∈ [-90°, 90°] of unit vectors (x, y, z).
The density, per steradian (the uniform law is 1/(4π) ≈ 0.0796 sr⁻¹), is evaluated at the centres
of ``grid`` × ``grid/2`` cells of longitude and latitude, from one of (``density``; the title says
which):

- ``"model"``: exp(``model.log_prob``) (probability-flow ODE, nats w.r.t. area);
- ``"samples"`` / ``"data"``: a kernel density estimate with the von Mises–Fisher kernel
  f(u) = κ / (2π (1 - e^{-2κ})) · exp(κ (u·x_i - 1)) averaged over the points x_i, with
  κ = 1/σ² for a ``bandwidth`` σ in degrees (for large κ the kernel is close to a Gaussian of
  standard deviation σ in every tangent direction). It integrates to 1 over the sphere exactly.
"""

from __future__ import annotations

import math

import numpy as np
import torch

from heatwalk.checks import check_choice, check_int, check_number
from heatwalk.errors import InputError
from heatwalk.frontend.plots.figures import (
    COLOR_SCALE_OPTION, DENSITY_OPTION, MAX_POINTS_OPTION, OVERLAY_COLOUR, check_model_space, choose_density,
    density_cmap, density_norm, log_prob_on, points, render, spread,
)
from heatwalk.spaces.base import Option

PROJECTIONS = ("mollweide", "hammer")
PROJECTION_OPTION = Option("projection", str, "equal-area map projection", default="mollweide", choices=PROJECTIONS)
#: the options the command line offers
OPTIONS = (
    DENSITY_OPTION,
    PROJECTION_OPTION,
    Option("grid", int, "longitude cells of the model's density grid (half as many of latitude)", default=96,
           metavar="N"),
    Option("bandwidth", float, "kernel width (degrees) of a samples or data density", default=6.0, metavar="DEG"),
    COLOR_SCALE_OPTION,
    MAX_POINTS_OPTION,
)


def shows_model_density(space) -> bool:
    return True


def default_size(space) -> tuple[int, int]:
    return (900, 520)


def lon_lat(v: np.ndarray) -> np.ndarray:
    """Longitude and latitude in radians of unit vectors (m, 3): shape (m, 2)."""
    return np.stack([np.arctan2(v[:, 1], v[:, 0]), np.arcsin(np.clip(v[:, 2], -1.0, 1.0))], 1)


def unit_vectors(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Unit vectors (…, 3) of longitudes and latitudes in radians."""
    return np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], -1)


def vmf_density(at: np.ndarray, x: np.ndarray, bandwidth_deg: float, chunk: int = 4096) -> np.ndarray:
    """Von Mises–Fisher kernel density (per sr) of points x (m, 3) at unit vectors ``at`` (g, 3)."""
    kappa = 1.0 / math.radians(bandwidth_deg) ** 2
    c = kappa / (2 * math.pi * -math.expm1(-2 * kappa))
    total = np.zeros(at.shape[0])
    for i in range(0, x.shape[0], chunk):
        total += np.exp(kappa * (at @ x[i:i + chunk].T - 1.0)).sum(1)
    return c * total / x.shape[0]


def map_grid(grid: int):
    """Cell edges (lon, lat, radians) and the unit vectors of the cell centres, shape (grid // 2, grid, 3)."""
    lon_e = np.linspace(-math.pi, math.pi, grid + 1)
    lat_e = np.linspace(-math.pi / 2, math.pi / 2, grid // 2 + 1)
    lon_c, lat_c = 0.5 * (lon_e[1:] + lon_e[:-1]), 0.5 * (lat_e[1:] + lat_e[:-1])
    lon_m, lat_m = np.meshgrid(lon_c, lat_c)
    return lon_e, lat_e, unit_vectors(lon_m, lat_m)


def map_axes(fig, spec, projection: str, xlabel: str = "longitude (deg)", ylabel: str = "latitude (deg)"):
    """An equal-area map axes with a graticule and labelled axes (tick labels are degrees)."""
    ax = fig.add_subplot(spec, projection=projection) if spec is not None else fig.add_subplot(projection=projection)
    ax.grid(True, color="0.6", lw=0.4, alpha=0.7)
    ax.set_xticks(np.radians([-120, -60, 0, 60, 120]))
    ax.set_yticks(np.radians([-60, -30, 0, 30, 60]))
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.tick_params(axis="x", labelsize="x-small")
    ax.tick_params(axis="y", labelsize="small")
    return ax


def draw_directions(fig, space, data, samples, *, model=None, density=None, projection: str = "mollweide",
                    grid: int = 96, bandwidth: float = 6.0, color_scale: str = "linear",
                    max_points: int = 3000) -> None:
    """Draw the density of directions on S² with the data over it (see the module docstring)."""
    if getattr(space, "d", None) != 2:
        raise InputError(f"the directions picture is a map of S^2; {space!r} has no map", field="space")
    check_model_space(model, space)
    check_choice("projection", projection, PROJECTIONS)
    grid = check_int("grid", grid, minimum=8)
    bandwidth = check_number("bandwidth (degrees)", bandwidth, minimum=0, open_minimum=True)
    density_norm(color_scale, 1.0)  # checks the choice before any work
    data, samples = points(space, data, "data"), points(space, samples, "samples")
    source = choose_density(density, data=data, samples=samples, model=model)
    lon_e, lat_e, centres = map_grid(grid)
    if source == "model":
        dens = np.exp(log_prob_on(model, torch.as_tensor(centres.reshape(-1, 3)))).reshape(centres.shape[:2])
        how = f"model density exp(log_prob) on a {grid} × {grid // 2} grid"
    else:
        pts = (samples if source == "samples" else data).numpy()
        dens = vmf_density(centres.reshape(-1, 3), pts, bandwidth).reshape(centres.shape[:2])
        how = (f"{source} density: von Mises–Fisher kernel density of {pts.shape[0]} "
               f"{'samples' if source == 'samples' else 'points'}, bandwidth {bandwidth:g}°")
    ax = map_axes(fig, None, projection)
    mesh = ax.pcolormesh(lon_e, lat_e, dens, cmap=density_cmap(), norm=density_norm(color_scale, float(dens.max())),
                         shading="flat", rasterized=True)
    fig.colorbar(mesh, ax=ax, label=f"density (1/sr; uniform = {1 / (4 * math.pi):.4f})", shrink=0.8)
    if data is not None:
        shown = lon_lat(data[torch.as_tensor(spread(data.shape[0], max_points))].numpy())
        ax.scatter(shown[:, 0], shown[:, 1], s=4 if shown.shape[0] < 1000 else 1.5, lw=0, alpha=0.6,
                   color=OVERLAY_COLOUR, label=f"data ({shown.shape[0]} shown)")
        ax.legend(loc="lower right", fontsize="x-small", markerscale=3, framealpha=0.7)
    ax.set_title(how, fontsize="small")


def plot_directions(space, data=None, samples=None, *, model=None, size=None, dpi: int = 100, title: str = "",
                    **options):
    """A Figure: equal-area map of the density of directions on S² with the data over it (module docstring).

    Options: ``density`` ("model", "samples" or "data"; default samples if given, else the model, else
    the data), ``projection`` ("mollweide" or "hammer"), ``grid`` (longitude cells), ``bandwidth``
    (degrees), ``color_scale`` ("linear" or "log"), ``max_points`` (data points drawn). ``size`` in pixels.
    """
    return render("directions", draw_directions, default_size, space, data, samples, model, size, dpi, title,
                  options)
