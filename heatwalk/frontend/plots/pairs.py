"""The layout shared by the pictures of k coordinates (the torus's angles, R^d's coordinates).

- k = 1: one panel, the coordinate's density as a curve over a histogram of the data;
- k = 2: one heat map of the pair's density with the data over it and a colour bar;
- k ≥ 3: the lower triangle of a k × k grid of panels, pair (j, i) below the diagonal and coordinate
  i's 1-D density on it, with one colour scale for all pairs; the empty top-right panel holds the
  colour bar and the legend in words.

The pictures supply the drawing of a panel (``one``, ``pair``) and of a pair's density; this module
only arranges them, so both pictures keep the same layout, captions and colour scale.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from heatwalk.checks import check_int, check_number
from heatwalk.frontend.plots.figures import check_model_space, check_names, choose_density, density_norm, points


def pairs_size(k: int) -> tuple[int, int]:
    """Default figure size in pixels for k coordinates."""
    if k == 1:
        return (800, 450)
    if k == 2:
        return (760, 640)
    return (min(240 * k + 160, 2400), min(230 * k + 80, 2300))


def density_caption(source: str, m: int | None, grid: int, bins: int, smoothing: float, per: str) -> str:
    """What the density drawn is: the model's on a grid, or a smoothed histogram of m samples or points."""
    if source == "model":
        return f"model density exp(log_prob) on a {grid}-cell grid per {per}"
    return (f"{source} density: histogram of {m} {'samples' if source == 'samples' else 'points'}, "
            f"{bins} bins per {per}, smoothed σ = {smoothing:g} bin")


def checked_inputs(space, k: int, what: str, data, samples, *, model, density, columns, grid, bins, smoothing,
                   color_scale):
    """The checks both pictures make before any work: (data, samples, names, grid, bins, smoothing, source), with
    ``source`` the density drawn (``choose_density``; the model's only for k <= 2) and the colour scale checked."""
    check_model_space(model, space)
    data, samples = points(space, data, "data"), points(space, samples, "samples")
    names = check_names(columns, k, space.column_names(), what)
    grid, bins = check_int("grid", grid, minimum=4), check_int("bins", bins, minimum=4)
    smoothing = check_number("smoothing", smoothing, minimum=0)
    source = choose_density(density, data=data, samples=samples, model=model, model_ok=k <= 2,
                            why=f"a pair of {k} {what} has a marginal density that a grid of the joint law "
                                "does not give")
    density_norm(color_scale, 1.0)  # checks the choice before any work
    return data, samples, names, grid, bins, smoothing, source


def draw_pairs_layout(fig, k: int, names, *, one: Callable, pair: Callable, pair_density: Callable, how: str,
                      source: str, color_scale: str, unit: str, scale: float = 1.0, shown=None) -> None:
    """Arrange the panels of k coordinates on ``fig`` (module docstring).

    ``one(ax, i, how, small)`` draws coordinate i's 1-D density panel (with a legend);
    ``pair(ax, dens, (a, b), norm, small)`` draws the heat map of the density ``dens`` of coordinates
    (a, b) and returns its image; ``pair_density([a, b])`` is that density per unit of the points, shown
    divided by ``scale²`` (the picture's unit per unit of the points, e.g. 180/π for degrees), in 1/``unit``².
    ``shown`` are the data points drawn over the pairs (for the words of the legend), or None.
    """
    if k == 1:
        one(fig.add_subplot(), 0, how, False)
        return
    if k == 2:
        ax = fig.add_subplot()
        dens = pair_density([0, 1])
        im = pair(ax, dens, (0, 1), density_norm(color_scale, dens.max() / scale ** 2), False)
        fig.colorbar(im, ax=ax, label=f"density (1/{unit}²)")
        ax.set_title(how, fontsize="small")
        return
    axes = fig.subplots(k, k, squeeze=False)
    pairs = {(i, j): pair_density([j, i]) for i in range(k) for j in range(i)}
    norm = density_norm(color_scale, max(float(np.max(p)) for p in pairs.values()) / scale ** 2)
    im = None
    for i in range(k):
        for j in range(k):
            ax = axes[i, j]
            if j > i:
                ax.set_axis_off()
            elif j == i:
                one(ax, i, "", True)
                ax.set_title(names[i], fontsize="small")
                ax.get_legend().remove()
            else:
                im = pair(ax, pairs[(i, j)], (j, i), norm, True)
                if ax.get_legend() is not None:
                    ax.get_legend().remove()
    corner = axes[0, k - 1]  # empty: holds the colour bar and the legend in words
    cax = corner.inset_axes([0.05, 0.25, 0.9, 0.1])
    bar = fig.colorbar(im, cax=cax, orientation="horizontal", label=f"density of each pair (1/{unit}²)")
    bar.ax.xaxis.set_label_position("top")  # below the bar it would collide with a tick offset such as 1e-5
    note = "" if shown is None else f"\nred dots: data ({shown.shape[0]} shown)\nbars: histograms of the data"
    words = how.replace(": ", ":\n", 1).replace(", smoothed", ",\nsmoothed") + note + f"\ncurves: {source} density"
    corner.text(0.0, 1.0, words, ha="left", va="top", fontsize="small", transform=corner.transAxes)
