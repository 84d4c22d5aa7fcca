"""Pictures of rotations (SO(3)): rotation axes on an equal-area map coloured by the rotation angle,
and the histogram of rotation angles against the law of the angle of a uniform (Haar) rotation.

A rotation R is written as the unit quaternion (w, v) with w ≥ 0 (Shepperd's method, as in
:mod:`heatwalk.spaces.so3`): its angle is ω = 2 atan2(|v|, w) ∈ [0, π] and its axis v / |v|, drawn
as longitude/latitude on the Mollweide (or Hammer) projection. The identity (|v| = 0) has no axis
and is left off the map (the title counts such points).

The angle of a Haar-distributed rotation has density (1 - cos ω)/π = (2/π) sin²(ω/2) on [0, π]
(per radian; the volume of rotations of angle in [ω, ω + dω] is 8π(1 - cos ω) dω out of 8π², see
:class:`heatwalk.spaces.SO3`); with ``degrees=True`` it is drawn per degree, (1 - cos ω)/180.
"""

from __future__ import annotations

import math

import numpy as np
import torch

from heatwalk.checks import check_choice, check_int
from heatwalk.errors import InputError
from heatwalk.frontend.plots.directions import PROJECTION_OPTION, PROJECTIONS, map_axes
from heatwalk.frontend.plots.figures import (
    MAX_POINTS_OPTION, DATA_COLOUR, REFERENCE_COLOUR, SAMPLES_COLOUR, check_model_space, points, render, spread,
)
from heatwalk.spaces.base import Option
from heatwalk.spaces.so3 import matrix_to_quaternion

ANGLE_CMAP = "viridis"


#: the options the command line offers (``degrees`` follows the data file's units); no model density: the
#: picture shows point sets, so ``heatwalk plot`` draws samples from a model
OPTIONS = (
    PROJECTION_OPTION,
    Option("bins", int, "bins of the rotation-angle histogram", default=36, metavar="N"),
    MAX_POINTS_OPTION,
)


def default_size(space) -> tuple[int, int]:
    return (1100, 760)


def axes_and_angles(r: torch.Tensor):
    """Rotation axes as (longitude, latitude) radians (m, 2), angles ω in [0, π] (m,), and which have an axis."""
    q = matrix_to_quaternion(r).numpy()
    s = np.linalg.norm(q[:, 1:], axis=1)
    angle = 2 * np.arctan2(s, q[:, 0])
    has_axis = s > 0
    v = q[:, 1:] / np.where(has_axis, s, 1.0)[:, None]
    lonlat = np.stack([np.arctan2(v[:, 1], v[:, 0]), np.arcsin(np.clip(v[:, 2], -1.0, 1.0))], 1)
    return lonlat, angle, has_axis


def haar_angle_density(omega: np.ndarray) -> np.ndarray:
    """(1 - cos ω)/π: density per radian of the rotation angle of a uniform rotation, ω in [0, π]."""
    return (1.0 - np.cos(omega)) / math.pi


def draw_rotations(fig, space, data, samples, *, model=None, degrees: bool = True, projection: str = "mollweide",
                   bins: int = 36, max_points: int = 3000) -> None:
    """Draw axes maps (data, samples) coloured by angle and the angle histogram (module docstring).

    ``model`` is not used: the picture shows point sets (give samples drawn from the model).
    """
    check_model_space(model, space)
    check_choice("projection", projection, PROJECTIONS)
    bins = check_int("bins", bins, minimum=2)
    sets = [(name, x) for name, x in (("data", points(space, data, "data")),
                                      ("samples", points(space, samples, "samples"))) if x is not None]
    if not sets:
        raise InputError("the rotations picture draws point sets: give data or samples", field="data")
    scale, unit = (180.0 / math.pi, "deg") if degrees else (1.0, "rad")
    top = math.pi * scale
    gs = fig.add_gridspec(2, len(sets), height_ratios=[1.25, 1.0])
    hist = fig.add_subplot(gs[1, :])
    maps = []
    for k, (name, x) in enumerate(sets):
        lonlat, angle, has_axis = axes_and_angles(x)
        keep = spread(x.shape[0], max_points)
        keep = keep[has_axis[keep]]
        ax = map_axes(fig, gs[0, k], projection, "axis longitude (deg)", "axis latitude (deg)")
        sc = ax.scatter(lonlat[keep, 0], lonlat[keep, 1], c=angle[keep] * scale, cmap=ANGLE_CMAP, vmin=0.0,
                        vmax=top, s=5 if keep.size < 1000 else 2, lw=0, alpha=0.8, rasterized=True)
        no_axis = int((~has_axis).sum())
        ax.set_title(f"rotation axes of the {name} (n={x.shape[0]}, {keep.size} shown"
                     + (f", {no_axis} identity rotations have no axis" if no_axis else "") + ")", fontsize="small")
        maps.append(ax)
        colour, style = (DATA_COLOUR, "stepfilled") if name == "data" else (SAMPLES_COLOUR, "step")
        hist.hist(angle * scale, bins=bins, range=(0.0, top), density=True, histtype=style, color=colour,
                  alpha=0.4 if style == "stepfilled" else 1.0, lw=2, label=f"{name} (n={x.shape[0]})")
    fig.colorbar(sc, ax=maps, label=f"rotation angle ω ({unit})", shrink=0.8)
    omega = np.linspace(0.0, math.pi, 361)
    hist.plot(omega * scale, haar_angle_density(omega) / scale, color=REFERENCE_COLOUR, lw=1.5, ls="--",
              label="uniform (Haar) rotations: (1 − cos ω)/π")
    hist.set_xlim(0.0, top)
    hist.set_ylim(bottom=0.0)
    if degrees:
        hist.set_xticks([0, 30, 60, 90, 120, 150, 180])
    hist.set_xlabel(f"rotation angle ω ({unit})")
    hist.set_ylabel(f"density (1/{unit})")
    hist.set_title("rotation angles", fontsize="small")
    hist.legend(loc="upper left", fontsize="small")


def plot_rotations(space, data=None, samples=None, *, model=None, size=None, dpi: int = 100, title: str = "",
                   **options):
    """A Figure of rotation axes coloured by angle and the angle histogram against the Haar law (module docstring).

    Options: ``degrees`` (default True), ``projection`` ("mollweide" or "hammer"), ``bins`` (angle
    histogram), ``max_points`` (points drawn per map). ``size`` in pixels.
    """
    return render("rotations", draw_rotations, default_size, space, data, samples, model, size, dpi, title,
                  options)
